//! Reports for QA and production: one self-contained HTML file per lot (inline CSS and
//! inline SVG charts, printable) and a site overview; the cycle table as CSV is the
//! export's (`notebook::write_csv`).
//!
//! Rendering is pure: the shell fills [`LotReport`] or [`SiteReport`] from the store and
//! the fit, and gets a `String` back. Nothing here reads the clock, the database or the
//! network, so a report is reproducible from its data.

mod chart;
mod escape;
mod html;
mod model;
mod signoff_html;
mod table;

pub use chart::{CHART_SIZE, ChartError, activity_svg, sparkline_svg, ton_svg};
pub use escape::{defuse_csv_cell, escape_html};
pub use html::{FIXED_CAUTIONS, lot_html, site_html};
pub use model::*;
