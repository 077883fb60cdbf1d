//! `turnbook report`: a lot's report (HTML, and CSV when asked) or the site summary.

use super::{CmdResult, Failure, ReportArgs};
use crate::config::Config;
use crate::notebook;

/// `turnbook report`.
pub fn report(cfg: &Config, a: &ReportArgs) -> CmdResult {
    match (a.lot.as_deref(), a.site) {
        (Some(lot), false) => {
            notebook::write_lot_report(cfg, lot, a.as_of, &a.out, a.csv.as_deref())?;
            match a.as_of {
                Some(seq) => println!(
                    "report of lot {lot} as it stood after event {seq} written to {}",
                    a.out.display()
                ),
                None => println!("report of lot {lot} written to {}", a.out.display()),
            }
        }
        (None, true) => {
            notebook::write_site_report(cfg, &a.out)?;
            println!("site report written to {}", a.out.display());
            if let Some(csv) = &a.csv {
                notebook::write_site_csv(cfg, csv)?;
                println!("every lot's cycles written to {}", csv.display());
            }
        }
        _ => {
            return Err(Failure::usage(
                "give a LOT, or --site for the summary of all lots",
            ));
        }
    }
    Ok(0)
}
