//! The computed figures stored for SQL readers (`cycle_figures`, `lot_figures`, read
//! through the views `cycle_results` and `lot_results`, migration 0014).
//!
//! Derived data like `fits`: outside the audit chain, replaced whole at each recompute of
//! a lot, in the recompute's transaction, so the views never mix two recomputes of a lot.

use rusqlite::params;

use super::{Result, Transaction};

/// One cycle's figures as `cycle_figures` stores them.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CycleFigures {
    pub batch_id: String,
    pub cycle_no: i64,
    pub ton: Option<f64>,
    pub ton_per_mol_metal_available: Option<f64>,
    pub cumulative_ton: Option<f64>,
    pub tof_average_per_h: Option<f64>,
    pub tof_initial_per_h: Option<f64>,
    pub k_app_per_h: Option<f64>,
    pub k_app_se_per_h: Option<f64>,
    pub activity: Option<f64>,
    pub activity_se: Option<f64>,
    pub activity_basis: String,
    pub metal_charged_mmol: Option<f64>,
    pub metal_available_mmol: Option<f64>,
    pub catalyst_to_substrate: Option<f64>,
    /// JSON array of the cycle's flags.
    pub flags_json: String,
}

/// A lot's figures as `lot_figures` stores them.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LotFigures {
    pub lot: String,
    /// `ok` or `attention` (someone should look at the lot).
    pub state: &'static str,
    pub model: Option<String>,
    pub latest_activity: Option<f64>,
    pub cumulative_ton: Option<f64>,
    pub forecast_status: Option<String>,
    pub crossing_cycle: Option<f64>,
    pub crossing_cycle_lower: Option<f64>,
    pub crossing_cycle_upper: Option<f64>,
    pub crossing_date: Option<String>,
    pub crossing_date_early: Option<String>,
    pub crossing_date_late: Option<String>,
    pub order_by_date: Option<String>,
    pub next_batch_verdict: Option<String>,
    pub next_batch_activity: Option<f64>,
    pub next_batch_activity_lower: Option<f64>,
    pub abrupt_loss: bool,
    pub flags_json: String,
    pub attention_json: String,
}

/// Replace a lot's stored figures with these, computed after event `after` at `at`.
pub fn store_figures(
    tx: &Transaction<'_>,
    lot: &LotFigures,
    cycles: &[CycleFigures],
    after: i64,
    at: &str,
) -> Result<()> {
    clear_figures(tx, &lot.lot)?;
    for c in cycles {
        store_cycle_figures(tx, &lot.lot, c, after, at)?;
    }
    store_lot_figures(tx, lot, after, at)
}

/// The first step of replacing a lot's figures one cycle at a time (a lot of 200,000
/// cycles is never held whole): remove its cycles' figures. Then
/// [`store_cycle_figures`] for each cycle and [`store_lot_figures`], in one transaction.
pub fn clear_figures(tx: &Transaction<'_>, lot: &str) -> Result<()> {
    tx.prepare_cached("DELETE FROM cycle_figures WHERE lot = ?1")?
        .execute([lot])?;
    Ok(())
}

/// Store one cycle's figures of `lot` (see [`clear_figures`]).
pub fn store_cycle_figures(
    tx: &Transaction<'_>,
    lot: &str,
    c: &CycleFigures,
    after: i64,
    at: &str,
) -> Result<()> {
    let mut insert = tx.prepare_cached(
        "INSERT OR REPLACE INTO cycle_figures(batch_id, lot, cycle_no, ton,
             ton_per_mol_metal_available, cumulative_ton, tof_average_per_h, tof_initial_per_h,
             k_app_per_h, k_app_se_per_h, activity, activity_se, activity_basis,
             metal_charged_mmol, metal_available_mmol, catalyst_to_substrate_mol_per_mol,
             flags, after_seq, computed_at)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17,
             ?18, ?19)",
    )?;
    insert.execute(params![
        c.batch_id,
        lot,
        c.cycle_no,
        c.ton,
        c.ton_per_mol_metal_available,
        c.cumulative_ton,
        c.tof_average_per_h,
        c.tof_initial_per_h,
        c.k_app_per_h,
        c.k_app_se_per_h,
        c.activity,
        c.activity_se,
        c.activity_basis,
        c.metal_charged_mmol,
        c.metal_available_mmol,
        c.catalyst_to_substrate,
        c.flags_json,
        after,
        at
    ])?;
    Ok(())
}

/// Store the lot's own figures (see [`clear_figures`]).
pub fn store_lot_figures(
    tx: &Transaction<'_>,
    lot: &LotFigures,
    after: i64,
    at: &str,
) -> Result<()> {
    tx.prepare_cached(
        "INSERT OR REPLACE INTO lot_figures(lot, state, model, latest_activity, cumulative_ton,
             forecast_status, crossing_cycle, crossing_cycle_lower, crossing_cycle_upper,
             crossing_date, crossing_date_early, crossing_date_late, order_by_date,
             next_batch_verdict, next_batch_activity, next_batch_activity_lower, abrupt_loss,
             flags, attention, after_seq, computed_at)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17,
             ?18, ?19, ?20, ?21)",
    )?
    .execute(params![
        lot.lot,
        lot.state,
        lot.model,
        lot.latest_activity,
        lot.cumulative_ton,
        lot.forecast_status,
        lot.crossing_cycle,
        lot.crossing_cycle_lower,
        lot.crossing_cycle_upper,
        lot.crossing_date,
        lot.crossing_date_early,
        lot.crossing_date_late,
        lot.order_by_date,
        lot.next_batch_verdict,
        lot.next_batch_activity,
        lot.next_batch_activity_lower,
        lot.abrupt_loss,
        lot.flags_json,
        lot.attention_json,
        after,
        at
    ])?;
    Ok(())
}

/// A lot's stored figures made after event `after_seq`, without its cycles'.
pub fn stored_lot_figures(
    conn: &rusqlite::Connection,
    lot: &str,
    after_seq: i64,
) -> Result<Option<LotFigures>> {
    use rusqlite::OptionalExtension as _;
    let figures = conn
        .prepare_cached(
            "SELECT state, model, latest_activity, cumulative_ton, forecast_status,
                 crossing_cycle, crossing_cycle_lower, crossing_cycle_upper, crossing_date,
                 crossing_date_early, crossing_date_late, order_by_date, next_batch_verdict,
                 next_batch_activity, next_batch_activity_lower, abrupt_loss, flags, attention
             FROM lot_figures WHERE lot = ?1 AND after_seq = ?2",
        )?
        .query_row(params![lot, after_seq], |r| {
            let state: String = r.get(0)?;
            Ok(LotFigures {
                lot: lot.to_string(),
                state: if state == "ok" {
                    "ok"
                } else if state == "attention" {
                    "attention"
                } else {
                    "other"
                },
                model: r.get(1)?,
                latest_activity: r.get(2)?,
                cumulative_ton: r.get(3)?,
                forecast_status: r.get(4)?,
                crossing_cycle: r.get(5)?,
                crossing_cycle_lower: r.get(6)?,
                crossing_cycle_upper: r.get(7)?,
                crossing_date: r.get(8)?,
                crossing_date_early: r.get(9)?,
                crossing_date_late: r.get(10)?,
                order_by_date: r.get(11)?,
                next_batch_verdict: r.get(12)?,
                next_batch_activity: r.get(13)?,
                next_batch_activity_lower: r.get(14)?,
                abrupt_loss: r.get(15)?,
                flags_json: r.get(16)?,
                attention_json: r.get(17)?,
            })
        })
        .optional()?;
    Ok(figures)
}

/// A lot's stored figures when they were computed after event `after_seq` (verify
/// compares them with figures recomputed from the records); `None` when none were or
/// they are older.
pub fn stored_figures(
    conn: &rusqlite::Connection,
    lot: &str,
    after_seq: i64,
) -> Result<Option<(LotFigures, Vec<CycleFigures>)>> {
    let figures = stored_lot_figures(conn, lot, after_seq)?;
    let Some(figures) = figures else {
        return Ok(None);
    };
    let mut st = conn.prepare_cached(&format!(
        "SELECT {CYCLE_FIGURE_COLUMNS} FROM cycle_figures WHERE lot = ?1 ORDER BY cycle_no, batch_id"
    ))?;
    let cycles = st
        .query_map([lot], cycle_figures_row)?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(Some((figures, cycles)))
}

const CYCLE_FIGURE_COLUMNS: &str = "batch_id, cycle_no, ton, ton_per_mol_metal_available,
    cumulative_ton, tof_average_per_h, tof_initial_per_h, k_app_per_h, k_app_se_per_h, activity,
    activity_se, activity_basis, metal_charged_mmol, metal_available_mmol,
    catalyst_to_substrate_mol_per_mol, flags";

fn cycle_figures_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<CycleFigures> {
    Ok(CycleFigures {
        batch_id: r.get(0)?,
        cycle_no: r.get(1)?,
        ton: r.get(2)?,
        ton_per_mol_metal_available: r.get(3)?,
        cumulative_ton: r.get(4)?,
        tof_average_per_h: r.get(5)?,
        tof_initial_per_h: r.get(6)?,
        k_app_per_h: r.get(7)?,
        k_app_se_per_h: r.get(8)?,
        activity: r.get(9)?,
        activity_se: r.get(10)?,
        activity_basis: r.get(11)?,
        metal_charged_mmol: r.get(12)?,
        metal_available_mmol: r.get(13)?,
        catalyst_to_substrate: r.get(14)?,
        flags_json: r.get(15)?,
    })
}

/// One batch's stored figures in lot `lot` (a lot checked cycle by cycle).
pub fn stored_cycle_figures(
    conn: &rusqlite::Connection,
    lot: &str,
    batch: &str,
) -> Result<Option<CycleFigures>> {
    use rusqlite::OptionalExtension as _;
    Ok(conn
        .prepare_cached(&format!(
            "SELECT {CYCLE_FIGURE_COLUMNS} FROM cycle_figures WHERE batch_id = ?1 AND lot = ?2"
        ))?
        .query_row(params![batch, lot], cycle_figures_row)
        .optional()?)
}

/// How many cycles of lot `lot` have stored figures.
pub fn cycle_figures_count(conn: &rusqlite::Connection, lot: &str) -> Result<usize> {
    let n: i64 = conn
        .prepare_cached("SELECT COUNT(*) FROM cycle_figures WHERE lot = ?1")?
        .query_row([lot], |r| r.get(0))?;
    Ok(usize::try_from(n).unwrap_or(0))
}

/// Every batch id of `cycles`, for "did you mean" suggestions.
pub fn batch_ids(conn: &rusqlite::Connection) -> Result<Vec<String>> {
    let mut st = conn.prepare("SELECT batch_id FROM cycles ORDER BY batch_id")?;
    let ids = st
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<String>>>()?;
    Ok(ids)
}
