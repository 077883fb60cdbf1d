//! The shared vocabulary of the notebook: plain data and rules every layer speaks, no I/O.
//!
//! - [`Quantity`]: what a cycle record can hold, each in one canonical unit.
//! - [`event`]: the payload of every audit-trail event and the rows it carries.
//! - [`ForecastStatus`]: where a replacement forecast stands, said plainly.
//! - [`cycle`]: a cycle's current view, derived from its append-only measurements.
//! - [`chain`]: how each event is linked to the one before it.
//! - [`time`]: the one timestamp format of tables, messages and reports.
//! - [`calendar`]: cycles into dates in the plant's time zone.
//! - [`numbers`]: numbers as people read them.
//! - [`signoff`]: the signer roster, a lot's sign-off state and the four-eyes rule.

pub mod calendar;
pub mod chain;
pub mod cycle;
pub mod event;
mod forecast;
pub mod numbers;
mod quantity;
pub mod signoff;
pub mod time;

pub use cycle::CycleView;
pub use event::{FileRow, LotRecord, MeasurementRow, Payload};
pub use forecast::ForecastStatus;
pub use quantity::Quantity;
