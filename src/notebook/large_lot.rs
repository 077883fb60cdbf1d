//! A registered lot of very many cycles (one export of a whole history) recomputed in
//! bounded memory: its cycles are read from the store twice, one at a time, instead of
//! all being held with their sources and metrics ([`super::lots::lot_state`] holds about
//! 4 KB a cycle: 900 MB for 200,000).
//!
//! The first pass finds what every cycle's metrics rest on ([`chem::BasisScan`]: the
//! activity reference, the initial metal, the usual ratio); the second computes each
//! cycle's metrics ([`chem::MetricsPass`], the same code [`chem::lot_metrics`] runs),
//! stores its figures and keeps only the series to fit, the totals the lot's line and
//! alerts read ([`CycleTotals`]), the conditions the hints compare and the cycles a
//! message lists.
//! What is stored from it is what the held state gives (a test compares them).

use std::collections::{BTreeMap, VecDeque};

use super::alerts::EVIDENCE_ROWS;
use super::lots::{
    CycleState, CycleTotals, LotState, RecordAttention, SeriesBuilder, StreamedCycles,
};
use crate::chem::cause::{CauseHints, HintsInput};
use crate::chem::{self, BasisScan, CycleInput, LotFacts, MetricsPass};
use crate::config::Config;
use crate::fit;
use crate::model::Quantity;
use crate::model::calendar::CADENCE_WINDOW;
use crate::model::event::LotRecord;
use crate::store::{self, Connection, Result, records};

/// Lots of at least this many cycles are recomputed by streaming. Far above any lot a
/// plant reuses (hundreds of cycles), so everyday lots keep the held state.
pub const STREAM_FROM: usize = 20_000;

/// Cycles between returns of the heap's free pages during the pass. Each cycle allocates
/// and frees a few small objects between the kept columns; left alone, the freed space
/// stayed resident (about 15 MB at 200,000 cycles). A return walks the free lists: a
/// millisecond or so, a dozen times a lot of 200,000 cycles.
const TRIM_EVERY: usize = 16_384;

/// The state of registered lot `lot` streamed from the store, each cycle with its metrics
/// handed to `each` as it comes (with the state as far as the cycles need it), when the
/// lot has at least `from` cycles. `None` otherwise, and when the store's order of its
/// cycles is not ascending in cycle number (cycles without a number among numbered ones):
/// the caller then takes the held state.
pub(crate) fn streamed_state(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    from: usize,
    mut each: impl FnMut(&LotState, &CycleState) -> Result<()>,
) -> Result<Option<LotState>> {
    let Some(rec) = records::lot(conn, lot)? else {
        return Ok(None);
    };
    let count = records::cycle_count_of_lot(conn, lot)?;
    if count < from.max(1) {
        return Ok(None);
    }
    let facts = LotFacts::from(&rec);
    let opts = super::lots::chem_options(cfg);
    let Some(basis) = first_pass(conn, cfg, lot, &facts, &opts)? else {
        return Ok(None);
    };
    let mut state = super::lots::shell(cfg, lot, Some(&rec));
    state.reference_cycle = basis.reference_cycle();
    state.reference_moved = basis.reference_moved();
    state.feed_lots = records::feed_lots_of_lot(conn, lot)?;
    let mut pass = MetricsPass::new(&facts, &opts, basis.clone());
    let mut kept = Kept::with_capacity(count);
    let mut seen = 0usize;
    each_cycle(conn, cfg, lot, |mut c, input| {
        super::lots::merge_metrics(&mut c, pass.next(&input));
        each(&state, &c)?;
        kept.add(cfg, c);
        seen += 1;
        if seen.is_multiple_of(TRIM_EVERY) {
            super::heap::release_heap();
        }
        Ok(())
    })?;
    let newest_active = kept.totals.newest_active;
    let mut state = finish(conn, cfg, &rec, state, kept)?;
    let suspect = state
        .analysis
        .as_ref()
        .zip(newest_active)
        .and_then(|(a, newest)| super::causes::suspect_of(cfg, a, newest));
    if let (Some(suspect), Some(s)) = (suspect, state.streamed.as_mut()) {
        let mut pass = MetricsPass::new(&facts, &opts, basis);
        s.hints = hints_pass(conn, cfg, lot, &mut pass, &state.feed_lots, suspect)?;
    }
    Ok(Some(state))
}

/// A third pass, only for a lot whose step or decline calls for hints: the conditions of
/// every cycle, as [`super::causes::lot_causes`] compares them.
fn hints_pass(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    pass: &mut MetricsPass<'_>,
    feed_lots: &BTreeMap<String, String>,
    suspect: u32,
) -> Result<Option<CauseHints>> {
    let mut input = HintsInput::new(suspect);
    let mut activity = None;
    let mut lost_before = None;
    each_cycle(conn, cfg, lot, |mut c, input_of| {
        super::lots::merge_metrics(&mut c, pass.next(&input_of));
        if !c.view.excluded {
            input.add(&super::causes::conditions(feed_lots, &c));
        }
        let m = c.metrics.as_ref();
        if c.cycle == suspect && activity.is_none() {
            activity = Some(m.and_then(|m| m.activity));
        }
        if c.cycle < suspect
            && let Some(l) = m.and_then(|m| m.cumulative_loss_fraction)
        {
            lost_before = Some(l);
        }
        Ok(())
    })?;
    Ok(input.finish(activity.flatten(), lost_before))
}

/// The first pass: the lot's basis, or `None` when its cycles do not come in ascending
/// cycle order.
fn first_pass(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    facts: &LotFacts,
    opts: &chem::ChemOptions,
) -> Result<Option<chem::LotBasis>> {
    let mut scan = BasisScan::new(facts, opts);
    let (mut last, mut ascending) = (0, true);
    each_cycle(conn, cfg, lot, |c, input| {
        ascending &= c.cycle >= last;
        last = c.cycle;
        scan.add(&input);
        Ok(())
    })?;
    Ok(ascending.then(|| scan.finish()))
}

/// Each cycle of the lot in the store's order, with its record flags and chemistry input,
/// and its sources where the chemistry reads them (an assay's σ comes from the profile
/// of the file a conversion was read from); otherwise the sources are looked up only for
/// the cycles a message lists ([`with_sources`]).
fn each_cycle(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    mut f: impl FnMut(CycleState, CycleInput) -> Result<()>,
) -> Result<()> {
    let mut i = 0;
    let needed = sources_needed(cfg);
    records::each_cycle_of_lot(conn, lot, |v| {
        let sources = if needed {
            store::lots::sources_of_batch(conn, &v.batch_id)?
        } else {
            Vec::new()
        };
        let c = super::lots::cycle_state(i, v, sources);
        i += 1;
        let input = super::lots::cycle_input(cfg, &c);
        f(c, input)
    })
}

/// Whether a cycle's chemistry reads its sources: when some profile states its assay's
/// uncertainty.
fn sources_needed(cfg: &Config) -> bool {
    cfg.profiles
        .values()
        .any(|p| p.conversion_uncertainty.is_some())
}

/// The cycles with their sources, looked up now if the pass did not.
fn with_sources(
    conn: &Connection,
    cfg: &Config,
    cycles: VecDeque<CycleState>,
) -> Result<Vec<CycleState>> {
    let mut cycles: Vec<CycleState> = cycles.into();
    if !sources_needed(cfg) {
        for c in &mut cycles {
            c.sources = store::lots::sources_of_batch(conn, &c.view.batch_id)?;
        }
    }
    Ok(cycles)
}

/// What the second pass keeps of the cycles.
#[derive(Default)]
struct Kept {
    series: SeriesBuilder,
    totals: CycleTotals,
    records: RecordAttention,
    starts: Vec<(u32, chrono::NaiveDateTime)>,
    cumulative: (Vec<f64>, Vec<f64>),
    product_first_kg: Option<Option<f64>>,
    /// The newest cycles a message lists ([`EVIDENCE_ROWS`]): all a streamed state holds.
    newest: VecDeque<CycleState>,
}

impl Kept {
    fn with_capacity(n: usize) -> Self {
        Kept {
            series: SeriesBuilder::with_capacity(n),
            ..Default::default()
        }
    }

    /// Only the newest [`CADENCE_WINDOW`] starts by cycle number make the cadence: the
    /// list is cut back to those (sorted stably, as the cadence sorts) whenever it doubles.
    fn add_start(&mut self, start: (u32, chrono::NaiveDateTime)) {
        self.starts.push(start);
        if self.starts.len() >= 2 * CADENCE_WINDOW {
            self.starts.sort_by_key(|(n, _)| *n);
            let cut = self.starts.len() - CADENCE_WINDOW;
            self.starts.drain(..cut);
        }
    }

    fn add(&mut self, cfg: &Config, c: CycleState) {
        self.series.push(cfg, &c);
        self.totals.add(&c);
        self.records.add(&c);
        if let Some(start) = super::dates::start_of(&c.view) {
            self.add_start(start);
        }
        if let Some((x, y)) = super::lots::cumulative_point(&c) {
            self.cumulative.0.push(x);
            self.cumulative.1.push(y);
        }
        if c.cycle == 1 && self.product_first_kg.is_none() {
            self.product_first_kg = Some(c.view.get(Quantity::ProductMass).map(|g| g / 1000.0));
        }
        if super::alerts::evidence_value(cfg, &c).is_some() {
            if self.newest.len() == EVIDENCE_ROWS {
                self.newest.pop_front();
            }
            self.newest.push_back(c);
        }
    }
}

/// The analysis and attention of the streamed lot (its hints come after), as [`super::lots::lot_state`]
/// makes them from the held cycles.
fn finish(
    conn: &Connection,
    cfg: &Config,
    rec: &LotRecord,
    mut state: LotState,
    mut kept: Kept,
) -> Result<LotState> {
    // The cumulative-TON plateau first: its points are gone before the analysis runs.
    let (cx, cy) = std::mem::take(&mut kept.cumulative);
    let lifetime_ton = super::lots::plateau_lifetime_of(&cx, &cy);
    drop((cx, cy));
    let series = kept.series.finish();
    let product_first_kg = kept.product_first_kg.flatten();
    let mut opts = super::lots::analysis_options(cfg, Some(rec), product_first_kg);
    opts.prior = super::family::family_prior(conn, cfg, rec, &series, &state.basis, None)?;
    // The pass freed a cycle's worth of small allocations 200,000 times over, scattered
    // through the heap: returned to the system before the fits take their columns, or the
    // process holds both at once.
    super::heap::release_heap();
    let mut analysis = (!series.x.is_empty()).then(|| fit::analyse_owned(series, &opts));
    if let Some(a) = analysis.as_mut() {
        let cadence = crate::model::calendar::Cadence::of(cfg.zone(), &kept.starts);
        super::dates::date_forecast_with(cfg, rec, cadence, a);
    }
    let mut attention = Vec::new();
    if let Some(a) = &analysis {
        attention.extend(super::lots::attention_from(a));
    }
    attention.extend(kept.records.lines());
    state.lot_flags = super::lots::lot_attention_of(cfg, &state, &mut attention);
    state.lifetime_ton = lifetime_ton;
    state.analysis = analysis;
    state.attention = attention;
    state.cycles = with_sources(conn, cfg, kept.newest)?;
    state.streamed = Some(Box::new(StreamedCycles {
        totals: kept.totals,
        hints: None,
    }));
    Ok(state)
}

/// What a recompute stores for lot `lot`, as text (its fit, lot line, alert snapshot, lot
/// figures and every cycle's figures; timestamps are not part of it): from the held state,
/// or streamed when `streamed` (a registered lot at any number of cycles, or one nobody
/// registered). Both must agree; the tests compare them.
pub fn recomputed_outputs(
    cfg: &Config,
    lot: &str,
    streamed: bool,
) -> super::Result<Option<String>> {
    let conn = store::open(&cfg.database_path())?;
    let mut cycles = Vec::new();
    let mut row = |s: &LotState, c: &CycleState| {
        cycles.push(super::export::cycle_row(s, c));
        Ok(())
    };
    let state = if streamed {
        let registered = streamed_state(&conn, cfg, lot, 0, &mut row)?;
        match registered {
            Some(s) => s,
            None => match super::lots::pending_state_streamed(&conn, cfg, lot, &mut row)? {
                Some((s, _)) => s,
                None => return Ok(None),
            },
        }
    } else {
        let s = super::lots::lot_state(&conn, cfg, lot)?;
        cycles = s
            .cycles
            .iter()
            .map(|c| super::export::cycle_row(&s, c))
            .collect();
        s
    };
    let snapshot = super::alerts::snapshot(cfg, &state);
    Ok(Some(format!(
        "fit {}\nline {}\nsnapshot {}\nlot figures {:?}\ncycle figures {cycles:?}",
        serde_json::to_string(&state.analysis)?,
        serde_json::to_string(&super::lots::lot_line(&state))?,
        serde_json::to_string(&snapshot)?,
        super::export::figures_of(&state).0,
    )))
}
