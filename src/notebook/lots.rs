//! A lot's state: the shell that feeds stored cycles to the pure chemistry
//! ([`crate::chem`]) and fitting ([`crate::fit`]), now or as the lot stood after any
//! event, and the lines of the lot and cycle tables.

use std::collections::BTreeSet;

use serde::Serialize;

use super::error::{NotebookError, Result as NResult};
use crate::chem::{self, ActivityBasis, ChemOptions, CycleInput, CycleMetrics, LotFacts};
use crate::config::{Axis, Config, Measure};
use crate::fit::{self, AnalysisOptions, Criterion, LotAnalysis, LotSeries, ModelId};
use crate::model::Quantity;
use crate::model::cycle::CycleView;
use crate::model::event::LotRecord;
use crate::store::lots::SourceRef;
use crate::store::{self, Connection, Result, records};

/// One cycle with its metrics and provenance.
#[derive(Debug, Clone, Serialize)]
pub struct CycleState {
    pub cycle: u32,
    pub view: CycleView,
    pub metrics: Option<CycleMetrics>,
    pub sources: Vec<SourceRef>,
    pub flags: Vec<String>,
}

/// A lot with every cycle and its current analysis.
#[derive(Debug, Clone, Serialize)]
pub struct LotState {
    pub lot: String,
    pub record: Option<LotRecord>,
    pub cycles: Vec<CycleState>,
    pub analysis: Option<LotAnalysis>,
    /// What the fit was made of.
    pub basis: String,
    /// Lifetime TON from the `plateau` model fitted to cumulative TON against cycle:
    /// (ton_max, its standard error).
    pub lifetime_ton: Option<(f64, Option<f64>)>,
    /// Plain-words reasons someone should look at this lot.
    pub attention: Vec<String>,
    /// What activity compares (the configured basis).
    pub activity_basis: ActivityBasis,
    /// The cycle whose rate is activity 1: cycle 1, or the first uncensored cycle when
    /// cycle 1 is censored.
    pub reference_cycle: Option<u32>,
    /// True when cycle 1 is censored and a later cycle is the reference.
    pub reference_moved: bool,
    /// Lot-level flags (e.g. `water-content-missing`), beside the cycles' own.
    pub lot_flags: Vec<String>,
    /// The feed (or substrate) lot of each batch that recorded one, by batch id.
    pub feed_lots: std::collections::BTreeMap<String, String>,
    /// Set when the lot was recomputed by streaming its cycles ([`super::large_lot`]):
    /// `cycles` then holds only the newest ones, and this what the whole lot gives.
    #[serde(skip)]
    pub streamed: Option<Box<StreamedCycles>>,
}

/// What the readers of a state take from all of a lot's cycles, gathered one cycle at a
/// time: [`LotState::totals`] gives it for any state, streamed or not.
#[derive(Debug, Clone, Default)]
pub struct CycleTotals {
    pub count: usize,
    /// Cycles with no field missing.
    pub complete: usize,
    /// The union of the cycles' flags.
    pub flags: BTreeSet<String>,
    /// The newest activity, cumulative TON and cumulative metal-loss fraction.
    pub latest_activity: Option<f64>,
    pub cumulative_ton: Option<f64>,
    pub loss_fraction: Option<f64>,
    /// The newest cycle with a metal-in-product figure, and that figure.
    pub metal_in_product: Option<(u32, f64)>,
    /// The newest cycle not excluded with an activity.
    pub newest_active: Option<u32>,
    /// The start of the newest batch: `Some(None)` until a start cannot be read.
    newest_start: Option<Option<chrono::NaiveDateTime>>,
}

impl CycleTotals {
    /// Take the next cycle (in the store's order) into the totals.
    pub fn add(&mut self, c: &CycleState) {
        self.count += 1;
        let m = c.metrics.as_ref();
        if m.is_some_and(|m| m.missing.is_empty()) {
            self.complete += 1;
        }
        self.flags.extend(c.flags.iter().cloned());
        let newer = |old: &mut Option<f64>, new: Option<f64>| {
            if new.is_some() {
                *old = new;
            }
        };
        newer(&mut self.latest_activity, m.and_then(|m| m.activity));
        newer(&mut self.cumulative_ton, m.and_then(|m| m.cumulative_ton));
        newer(
            &mut self.loss_fraction,
            m.and_then(|m| m.cumulative_loss_fraction),
        );
        if let Some(v) = c.view.get(Quantity::MetalInProduct) {
            self.metal_in_product = Some((c.cycle, v));
        }
        if !c.view.excluded && m.and_then(|m| m.activity).is_some() {
            self.newest_active = Some(c.cycle);
        }
        if let Some(t) = c.view.started_at.as_deref() {
            let t = crate::model::time::parse_local(t);
            self.newest_start = match (self.newest_start, t) {
                (Some(None), _) | (_, None) => Some(None),
                (Some(Some(a)), Some(t)) => Some(Some(a.max(t))),
                (None, Some(t)) => Some(Some(t)),
            };
        }
    }

    /// The totals of `cycles`.
    pub fn of(cycles: &[CycleState]) -> Self {
        let mut t = CycleTotals::default();
        for c in cycles {
            t.add(c);
        }
        t
    }

    /// The start of the lot's newest batch, when every start it records can be read.
    pub fn newest_start(&self) -> Option<chrono::NaiveDateTime> {
        self.newest_start.flatten()
    }
}

/// A lot streamed from the store: its totals and the hints on its suspect cycle.
#[derive(Debug, Clone, Default)]
pub struct StreamedCycles {
    pub totals: CycleTotals,
    pub hints: Option<crate::chem::cause::CauseHints>,
}

impl LotState {
    pub fn latest_activity(&self) -> Option<f64> {
        if let Some(s) = &self.streamed {
            return s.totals.latest_activity;
        }
        self.cycles
            .iter()
            .rev()
            .find_map(|c| c.metrics.as_ref().and_then(|m| m.activity))
    }

    /// What the whole lot's cycles give ([`CycleTotals`]), streamed or held.
    pub fn totals(&self) -> std::borrow::Cow<'_, CycleTotals> {
        match &self.streamed {
            Some(s) => std::borrow::Cow::Borrowed(&s.totals),
            None => std::borrow::Cow::Owned(CycleTotals::of(&self.cycles)),
        }
    }
}

pub(crate) fn chem_options(cfg: &Config) -> ChemOptions {
    ChemOptions {
        saturation: cfg.chemistry.saturation,
        activation_energy_j_per_mol: cfg.chemistry.activation_energy_kj_mol.map(|e| e * 1000.0),
        t_ref_k: cfg.chemistry.reference_temperature_c + 273.15,
        required: Vec::new(),
        activity_basis: cfg.chemistry.activity_basis,
        ratio_tolerance: cfg.chemistry.ratio_tolerance,
    }
}

/// The analysis options the configuration asks for.
pub fn analysis_options(
    cfg: &Config,
    record: Option<&LotRecord>,
    product_first_kg: Option<f64>,
) -> AnalysisOptions {
    let f = &cfg.fitting;
    let criterion = match (f.criterion_absolute, f.criterion_fraction) {
        (Some(a), _) => Criterion::Absolute(a),
        (None, Some(x)) => Criterion::FractionOfFresh(x),
        // Common practice default: replace at 60 % of the fresh activity.
        (None, None) => Criterion::FractionOfFresh(0.6),
    };
    let candidates: Vec<ModelId> = if f.models.is_empty() {
        ModelId::ACTIVITY.to_vec()
    } else {
        f.models
            .iter()
            .filter_map(|m| ModelId::from_id(m).ok())
            .collect()
    };
    let economics = cfg.economics.as_ref().and_then(|e| {
        let lot_cost = record.and_then(|r| r.cost).or(e.default_lot_cost)?;
        Some(fit::EconomicInputs {
            lot_cost,
            cost_per_cycle: e.cost_per_cycle,
            product_first_cycle: product_first_kg?,
            max_cycles: 200,
            currency: record
                .and_then(|r| r.site.as_ref())
                .and_then(|s| cfg.sites.iter().find(|x| &x.name == s))
                .and_then(|s| s.currency.clone()),
        })
    });
    AnalysisOptions {
        criterion,
        confidence: f.confidence,
        candidates,
        cusum_k: f.cusum_k,
        cusum_h: f.cusum_h,
        economics,
        ..AnalysisOptions::default()
    }
}

/// Compute a lot's state from the store: metrics of every cycle, and the fit.
pub fn lot_state(conn: &Connection, cfg: &Config, lot: &str) -> Result<LotState> {
    lot_state_as_of(conn, cfg, lot, None)
}

/// A lot's state now (`as_of` None) or as it stood after event `as_of`: the current view
/// is derived from the append-only history, so any earlier view can be rebuilt.
pub fn lot_state_as_of(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    as_of: Option<i64>,
) -> Result<LotState> {
    let (record, mut cycles) = stored_cycles(conn, lot, as_of)?;
    let mut attention = Vec::new();
    let Some(rec) = record.clone() else {
        for c in &mut cycles {
            c.flags.push("pending".into());
        }
        attention.push(pending_attention(lot, cycles.len()));
        return Ok(LotState {
            lot: lot.to_string(),
            record,
            cycles,
            analysis: None,
            basis: basis(cfg),
            lifetime_ton: None,
            attention,
            activity_basis: cfg.chemistry.activity_basis,
            reference_cycle: None,
            reference_moved: false,
            lot_flags: Vec::new(),
            feed_lots: Default::default(),
            streamed: None,
        });
    };
    let reference = add_metrics(cfg, &rec, &mut cycles);
    let series = lot_series(cfg, &cycles);
    let product_first_kg = cycles
        .iter()
        .find(|c| c.cycle == 1)
        .and_then(|c| c.view.get(Quantity::ProductMass))
        .map(|g| g / 1000.0);
    let mut opts = analysis_options(cfg, Some(&rec), product_first_kg);
    opts.prior = super::family::family_prior(conn, cfg, &rec, &series, &basis(cfg), as_of)?;
    let mut analysis = (!series.x.is_empty()).then(|| fit::analyse(&series, &opts));
    if let Some(a) = analysis.as_mut() {
        super::dates::date_forecast(cfg, &rec, cycles.iter().map(|c| &c.view), a);
    }
    if let Some(a) = &analysis {
        attention.extend(attention_from(a));
    }
    attention.extend(record_attention(&cycles));
    let lot_flags = lot_attention(cfg, &rec, &reference, &mut attention);
    let lifetime_ton = plateau_lifetime(&cycles);
    Ok(LotState {
        lot: lot.to_string(),
        record,
        cycles,
        analysis,
        basis: basis(cfg),
        lifetime_ton,
        attention,
        activity_basis: cfg.chemistry.activity_basis,
        reference_cycle: reference.cycle,
        reference_moved: reference.moved,
        lot_flags,
        feed_lots: records::feed_lots_of_lot(conn, lot)?,
        streamed: None,
    })
}

/// A lot's state before its cycles and analysis are put in (`rec`: its registration).
pub(crate) fn shell(cfg: &Config, lot: &str, rec: Option<&LotRecord>) -> LotState {
    LotState {
        lot: lot.to_string(),
        record: rec.cloned(),
        cycles: Vec::new(),
        analysis: None,
        basis: basis(cfg),
        lifetime_ton: None,
        attention: Vec::new(),
        activity_basis: cfg.chemistry.activity_basis,
        reference_cycle: None,
        reference_moved: false,
        lot_flags: Vec::new(),
        feed_lots: Default::default(),
        streamed: None,
    }
}

/// [`lot_attention`] of a state whose record and reference are set.
pub(crate) fn lot_attention_of(
    cfg: &Config,
    state: &LotState,
    attention: &mut Vec<String>,
) -> Vec<String> {
    let Some(rec) = state.record.as_ref() else {
        return Vec::new();
    };
    let reference = ReferenceOf {
        cycle: state.reference_cycle,
        moved: state.reference_moved,
    };
    lot_attention(cfg, rec, &reference, attention)
}

/// What the lot's registration and its activity reference ask of someone: a wet catalyst
/// without a water content, a reference moved past a censored cycle 1. Returns the lot's
/// flags and adds the attention lines.
fn lot_attention(
    cfg: &Config,
    rec: &LotRecord,
    reference: &ReferenceOf,
    attention: &mut Vec<String>,
) -> Vec<String> {
    let mut lot_flags = Vec::new();
    let warnings = chem::lot_warnings(rec);
    if !warnings.is_empty() {
        lot_flags.push("water-content-missing".to_string());
    }
    attention.extend(warnings.into_iter().map(|w| {
        w.strip_prefix(&format!("lot '{}': ", rec.lot))
            .map(str::to_string)
            .unwrap_or(w)
    }));
    if reference.moved
        && let Some(n) = reference.cycle
    {
        lot_flags.push("reference-first-uncensored".to_string());
        attention.push(format!(
            "cycle 1 is censored (conversion at or above {}), so its k_app is only a lower bound: activity is relative to cycle {n}, the first uncensored cycle",
            cfg.chemistry.saturation
        ));
    }
    lot_flags
}

/// What activity was made relative to.
struct ReferenceOf {
    cycle: Option<u32>,
    moved: bool,
}

/// The lot's registration and its cycles with their provenance and record flags, now or
/// as they stood after event `as_of`.
fn stored_cycles(
    conn: &Connection,
    lot: &str,
    as_of: Option<i64>,
) -> Result<(Option<LotRecord>, Vec<CycleState>)> {
    let Some(seq) = as_of else {
        // The current view fetches every batch's sources in one query, and turns each
        // row into its cycle as it is read.
        let record = records::lot(conn, lot)?;
        let mut all = store::lots::sources_of_lot(conn, lot)?;
        let mut cycles = Vec::with_capacity(records::cycle_count_of_lot(conn, lot)?);
        records::each_cycle_of_lot(conn, lot, |v| {
            let sources = all.remove(&v.batch_id).unwrap_or_default();
            cycles.push(cycle_state(cycles.len(), v, sources));
            Ok(())
        })?;
        return Ok((record, cycles));
    };
    let record = store::lots::lot_record_as_of(conn, lot, seq)?;
    let views = store::lots::cycles_as_of(conn, lot, seq)?;
    let mut cycles: Vec<CycleState> = Vec::with_capacity(views.len());
    for (i, v) in views.into_iter().enumerate() {
        let sources = store::lots::sources_of(conn, &v.batch_id, seq)?;
        cycles.push(cycle_state(i, v, sources));
    }
    Ok((record, cycles))
}

/// The `i`-th cycle of a lot (0-based, in the store's order) with its record flags.
pub(crate) fn cycle_state(i: usize, v: CycleView, sources: Vec<SourceRef>) -> CycleState {
    let n = v
        .cycle_no
        .and_then(|c| u32::try_from(c).ok())
        .unwrap_or(i as u32 + 1);
    let mut flags = Vec::new();
    if v.conflicts > 0 {
        flags.push("conflict".to_string());
    }
    if v.excluded {
        flags.push("excluded".to_string());
    }
    CycleState {
        cycle: n,
        view: v,
        metrics: None,
        sources,
        flags,
    }
}

/// The attention line of a lot nobody registered.
fn pending_attention(lot: &str, cycles: usize) -> String {
    format!(
        "{cycles} cycle(s) recorded for lot '{lot}', which nobody registered: pending until the lot is registered"
    )
}

/// The state of a lot with no registration, its cycles not kept: each is handed to `each`
/// as it is read (with the flags [`lot_state`] gives it), and the state comes back with
/// no cycles, the union of their flags in `lot_flags` (such a lot has no flags of its
/// own), and their count. Its lot line and figures are [`lot_state`]'s once the count is
/// put in the line. `None` when the lot is registered: its analysis needs every cycle.
pub(crate) fn pending_state_streamed(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    mut each: impl FnMut(&LotState, &CycleState) -> Result<()>,
) -> Result<Option<(LotState, usize)>> {
    if records::lot(conn, lot)?.is_some() {
        return Ok(None);
    }
    let mut state = shell(cfg, lot, None);
    let mut totals = CycleTotals::default();
    records::each_cycle_of_lot(conn, lot, |v| {
        let mut c = cycle_state(totals.count, v, Vec::new());
        c.flags.push("pending".into());
        each(&state, &c)?;
        totals.add(&c);
        Ok(())
    })?;
    let count = totals.count;
    state.lot_flags = totals.flags.iter().cloned().collect();
    state.attention.push(pending_attention(lot, count));
    state.streamed = Some(Box::new(StreamedCycles {
        totals,
        hints: None,
    }));
    Ok(Some((state, count)))
}

/// σ of a cycle's conversion: the assay uncertainty of the profile of the first file of
/// the batch whose profile maps a conversion column (the file the conversion was read
/// from, unless a later file filled a cell the first left empty). A value corrected by
/// hand keeps that assay's σ. `None` when the profile states none.
fn conversion_sd(cfg: &Config, c: &CycleState) -> Option<f64> {
    let x = c.view.get(Quantity::Conversion)?;
    let profile = c
        .sources
        .iter()
        .filter_map(|s| s.profile.as_deref())
        .filter_map(|p| cfg.profiles.get(p))
        .find(|p| p.columns.contains_key(Quantity::Conversion.key()))?;
    profile.conversion_uncertainty?.sd_at(x)
}

/// A cycle's input to the pure chemistry.
pub(crate) fn cycle_input(cfg: &Config, c: &CycleState) -> CycleInput {
    CycleInput {
        conversion_sd: conversion_sd(cfg, c),
        ..CycleInput::from_values(
            c.cycle,
            Quantity::ALL
                .iter()
                .filter_map(|q| c.view.get(*q).map(|v| (*q, v))),
        )
    }
}

/// Give a cycle its metrics, their flags added to its own.
pub(crate) fn merge_metrics(c: &mut CycleState, m: CycleMetrics) {
    for f in &m.flags {
        if !c.flags.contains(f) {
            c.flags.push(f.clone());
        }
    }
    c.metrics = Some(m);
}

/// Compute every cycle's metrics through the pure chemistry and merge their flags.
fn add_metrics(cfg: &Config, rec: &LotRecord, cycles: &mut [CycleState]) -> ReferenceOf {
    let facts = LotFacts::from(rec);
    let inputs: Vec<CycleInput> = cycles.iter().map(|c| cycle_input(cfg, c)).collect();
    let lot = chem::lot_metrics(&facts, &inputs, &chem_options(cfg));
    drop(inputs);
    let reference = ReferenceOf {
        cycle: lot.reference_cycle,
        moved: lot.reference_moved,
    };
    // Each cycle's metrics go to the first cycle of that number still without them; the
    // cycles of each number are listed once (a search per cycle made a lot of 200,000
    // cycles take a minute).
    let mut open: std::collections::HashMap<u32, std::collections::VecDeque<usize>> =
        std::collections::HashMap::new();
    for (i, c) in cycles.iter().enumerate() {
        if c.metrics.is_none() {
            open.entry(c.cycle).or_default().push_back(i);
        }
    }
    for m in lot.cycles {
        let at = open.get_mut(&m.cycle_no).and_then(|q| q.pop_front());
        if let Some(c) = at.and_then(|i| cycles.get_mut(i)) {
            merge_metrics(c, m);
        }
    }
    reference
}

/// The series the configuration asks to fit: activity (or TON) against cycle number (or
/// hours on stream), excluded cycles left out, saturated cycles marked censored.
///
/// `sd` (activity only) is each cycle's own standard error of activity, propagated from
/// its conversion assay's σ ([`CycleMetrics::activity_sd_own`]); `None` for a censored
/// cycle (a bound has no error) and where no σ is stated. The reference's error is left
/// out: it is one factor common to every point, which a fitted a0 absorbs. When no cycle
/// has one, `sd` stays empty (unweighted).
pub fn lot_series(cfg: &Config, cycles: &[CycleState]) -> LotSeries {
    let mut b = SeriesBuilder::default();
    for c in cycles {
        b.push(cfg, c);
    }
    b.finish()
}

/// [`lot_series`] one cycle at a time, in the store's order.
#[derive(Default)]
pub(crate) struct SeriesBuilder {
    series: LotSeries,
    hours: f64,
    /// Cycles the columns are sized for ([`SeriesBuilder::with_capacity`]).
    room: usize,
}

/// Pushes `v` onto a column left empty (meaning "none") while every value so far is
/// `none`; `len` values come before `v`. A lot with no censored cycle or no standard error
/// then holds no column for them: 17 bytes a cycle, 3.4 MB at 200,000.
fn push_sparse<T: Copy + PartialEq>(col: &mut Vec<T>, v: T, none: T, len: usize, room: usize) {
    if col.is_empty() {
        if v == none {
            return;
        }
        col.reserve_exact(room.max(len + 1));
        col.resize(len, none);
    }
    col.push(v);
}

impl SeriesBuilder {
    /// Room for `n` cycles at once: a lot streamed at 200,000 cycles otherwise grows each
    /// column by doubling, up to a third of it unused.
    pub(crate) fn with_capacity(n: usize) -> Self {
        let mut b = SeriesBuilder::default();
        let s = &mut b.series;
        s.x.reserve_exact(n);
        s.y.reserve_exact(n);
        b.room = n;
        b
    }

    pub(crate) fn push(&mut self, cfg: &Config, c: &CycleState) {
        let ton_basis = cfg.fitting.measure == Measure::Ton;
        let series = &mut self.series;
        let Some(m) = &c.metrics else { return };
        self.hours += c.view.get(Quantity::Duration).unwrap_or(0.0) / 3600.0;
        if c.view.excluded {
            return;
        }
        let y = if ton_basis { m.ton } else { m.activity };
        let Some(y) = y else { return };
        series.x.push(if cfg.fitting.axis == Axis::Hours {
            self.hours
        } else {
            f64::from(c.cycle)
        });
        series.y.push(y);
        let (len, room) = (series.x.len() - 1, self.room);
        push_sparse(
            &mut series.censored,
            !ton_basis && m.censored,
            false,
            len,
            room,
        );
        push_sparse(&mut series.ton, m.ton, None, len, room);
        let sd = if ton_basis || m.censored {
            None
        } else {
            m.activity_sd_own
        };
        push_sparse(&mut series.sd, sd, None, len, room);
    }

    /// An empty column means "none known" to the analysis: an all-unknown one is freed.
    pub(crate) fn finish(mut self) -> LotSeries {
        if self.series.sd.iter().all(Option::is_none) {
            self.series.sd = Vec::new();
        }
        if self.series.ton.iter().all(Option::is_none) {
            self.series.ton = Vec::new();
        }
        self.series
    }
}

/// What the records themselves ask of someone: pending cycles and unsettled conflicts.
fn record_attention(cycles: &[CycleState]) -> Vec<String> {
    let mut b = RecordAttention::default();
    for c in cycles {
        b.add(c);
    }
    b.lines()
}

/// [`record_attention`] one cycle at a time.
#[derive(Default)]
pub(crate) struct RecordAttention {
    pending: Vec<String>,
    conflicts: i64,
}

impl RecordAttention {
    pub(crate) fn add(&mut self, c: &CycleState) {
        self.conflicts += c.view.conflicts;
        if !c.flags.iter().any(|f| f == "pending") {
            return;
        }
        let missing: Vec<&str> = c
            .metrics
            .as_ref()
            .map(|m| m.missing.iter().map(|q| q.key()).collect())
            .unwrap_or_default();
        self.pending.push(format!(
            "cycle {} ({}) lacks {}",
            c.cycle,
            c.view.batch_id,
            if missing.is_empty() {
                "a field".to_string()
            } else {
                missing.join(", ")
            }
        ));
    }

    pub(crate) fn lines(self) -> Vec<String> {
        let mut out = Vec::new();
        if !self.pending.is_empty() {
            out.push(format!(
                "{} cycle(s) pending: a field a complete cycle needs is missing ({})",
                self.pending.len(),
                self.pending.join("; ")
            ));
        }
        if self.conflicts > 0 {
            out.push(format!(
                "{} conflicting value(s) kept and flagged; settle them with `turnbook correct`",
                self.conflicts
            ));
        }
        out
    }
}

/// Fit `plateau` (ton_max·(1 − exp(−kd·x))) to cumulative TON against cycle number; its
/// ton_max is the lot's lifetime TON. Needs more points than parameters + 1.
fn plateau_lifetime(cycles: &[CycleState]) -> Option<(f64, Option<f64>)> {
    let (x, y): (Vec<f64>, Vec<f64>) = cycles.iter().filter_map(cumulative_point).unzip();
    plateau_lifetime_of(&x, &y)
}

/// A cycle's point of cumulative TON against cycle number, when it has one.
pub(crate) fn cumulative_point(c: &CycleState) -> Option<(f64, f64)> {
    Some((f64::from(c.cycle), c.metrics.as_ref()?.cumulative_ton?))
}

/// [`plateau_lifetime`] of the points `x`, `y`.
pub(crate) fn plateau_lifetime_of(x: &[f64], y: &[f64]) -> Option<(f64, Option<f64>)> {
    if x.len() <= ModelId::Plateau.n_params() + 1 {
        return None;
    }
    let f = fit::fit_model(ModelId::Plateau, x, y, &fit::FitOptions::default()).ok()?;
    let ton_max = f.param("ton_max")?;
    (f.converged && ton_max.is_finite()).then(|| {
        (
            ton_max,
            f.std_errors.as_ref().and_then(|s| s.first().copied()),
        )
    })
}

pub(crate) fn basis(cfg: &Config) -> String {
    format!("{}-vs-{}", cfg.fitting.measure, cfg.fitting.axis)
}

pub(crate) fn attention_from(a: &LotAnalysis) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(f) = &a.forecast {
        match f.status {
            fit::ForecastStatus::ReachedAlready => {
                out.push("activity is already at or below the replacement criterion".into())
            }
            fit::ForecastStatus::Ahead => {
                if let (Some(x), Some(last)) = (f.x, a.observed.last().map(|p| p.0)) {
                    let lo = f.lower.map_or("?".into(), |l| format!("{l:.1}"));
                    out.push(format!(
                        "replacement criterion forecast at cycle {x:.1} ({:.0} % interval from {lo}), {:.1} cycles after the newest",
                        f.confidence * 100.0,
                        x - last
                    ));
                }
            }
            _ => {}
        }
    }
    if a.abrupt.as_ref().is_some_and(|b| b.suspected) {
        out.push(
            "abrupt loss of activity detected at the newest cycle: `turnbook fit` compares the \
             cycle with the lot's usual conditions"
                .into(),
        );
    }
    out
}

/// Lots that need someone's attention, one line each, among `listed` (`None`: every
/// lot of `names`, the lot names as [`store::lots::lot_names`] gives them), and how many
/// lots were left out. Only the listed lots' stored lines are read.
pub fn lots_needing_attention(
    conn: &Connection,
    cfg: &Config,
    names: &[String],
    listed: Option<&BTreeSet<String>>,
) -> Result<(Vec<String>, usize)> {
    let version = (fit::ENGINE_VERSION, cfg.analysis_fingerprint());
    let today = today(cfg);
    let (mut out, mut left_out) = (Vec::new(), 0);
    for lot in names {
        if listed.is_some_and(|set| !set.contains(lot)) {
            left_out += 1;
            continue;
        }
        let stored = store::lots::current_state_of(
            conn,
            (version.0, version.1.as_str()),
            store::lots::StatePart::Line,
            lot,
        )?;
        let line = match stored.flatten() {
            Some(json) => serde_json::from_str::<LotLine>(&json).ok(),
            None => None,
        };
        let line = match line {
            Some(line) => line,
            None => {
                let mut line = lot_line(&lot_state(conn, cfg, lot)?);
                if let Some(serde_json::Value::Object(f)) = line.forecast.as_mut()
                    && f.contains_key("as_of")
                {
                    f.insert("as_of".into(), serde_json::Value::String(today.clone()));
                }
                line
            }
        };
        for a in line.attention {
            out.push(format!("{}: {a}", line.lot));
        }
    }
    Ok((out, left_out))
}

/// Every lot's line as it stands: the state the last recompute of each lot stored (read,
/// not rebuilt), computed here only for a lot with no usable stored state (made by
/// another engine version or under other settings, or waiting for a recompute). The
/// sign-off is left for the caller. Dates are worked out as of today.
fn current_lines(conn: &Connection, cfg: &Config) -> Result<Vec<LotLine>> {
    let mut stored = store::lots::current_states(
        conn,
        (fit::ENGINE_VERSION, &cfg.analysis_fingerprint()),
        store::lots::StatePart::Line,
    )?;
    let today = today(cfg);
    let mut lines = Vec::new();
    for lot in store::lots::lot_names(conn)? {
        let kept = stored.remove(&lot).flatten();
        lines.push(line_of(conn, cfg, &lot, kept, &today)?);
    }
    Ok(lines)
}

/// A lot's line as the list shows it: its stored line (`stored`, the state's JSON) with
/// the forecast's `as_of` made `today`, or, with none usable, computed now.
pub(crate) fn line_of(
    conn: &Connection,
    cfg: &Config,
    lot: &str,
    stored: Option<String>,
    today: &str,
) -> Result<LotLine> {
    let kept = stored.and_then(|json| serde_json::from_str::<LotLine>(&json).ok());
    Ok(match kept {
        Some(mut line) => {
            if let Some(serde_json::Value::Object(f)) = line.forecast.as_mut()
                && f.contains_key("as_of")
            {
                f.insert("as_of".into(), serde_json::Value::String(today.to_string()));
            }
            line
        }
        None => lot_line(&lot_state(conn, cfg, lot)?),
    })
}

/// The plant-local date of today, as forecasts' dates are worked out on.
pub(crate) fn today(cfg: &Config) -> String {
    crate::model::calendar::local_date(cfg.zone(), chrono::Utc::now())
        .format("%Y-%m-%d")
        .to_string()
}

/// One line of `lots --json`.
#[derive(Debug, Serialize, serde::Deserialize)]
pub struct LotLine {
    pub lot: String,
    pub registered: bool,
    pub catalyst: Option<String>,
    pub metal: Option<String>,
    pub cycles: usize,
    pub complete_cycles: usize,
    pub latest_activity: Option<f64>,
    pub cumulative_ton: Option<f64>,
    /// Lifetime TON from the plateau model fitted to cumulative TON.
    pub lifetime_ton: Option<f64>,
    pub model: Option<String>,
    pub forecast: Option<serde_json::Value>,
    /// The next batch's predicted activity against the criterion, with its verdict.
    pub next_cycle: Option<fit::NextCycle>,
    pub abrupt_loss: bool,
    pub flags: Vec<String>,
    pub attention: Vec<String>,
    /// Where the lot stands with QA: `state` (none, reviewed, approved, rejected, stale)
    /// and `by`, the sign-off it rests on (for stale: the newest one).
    pub signoff: crate::model::signoff::SignOffState,
}

pub(crate) fn lot_line(s: &LotState) -> LotLine {
    let totals = s.totals();
    let mut flags = totals.flags.clone();
    flags.extend(s.lot_flags.iter().cloned());
    let a = s.analysis.as_ref();
    LotLine {
        lot: s.lot.clone(),
        registered: s.record.is_some(),
        catalyst: s.record.as_ref().map(|r| r.catalyst.clone()),
        metal: s.record.as_ref().map(|r| r.metal.clone()),
        cycles: totals.count,
        complete_cycles: totals.complete,
        latest_activity: totals.latest_activity,
        cumulative_ton: totals.cumulative_ton,
        lifetime_ton: s.lifetime_ton.map(|l| l.0),
        model: a.and_then(|a| a.chosen).map(|m| m.id().to_string()),
        forecast: a
            .and_then(|a| a.forecast.as_ref())
            .and_then(|f| serde_json::to_value(f).ok()),
        next_cycle: a.and_then(|a| a.next_cycle.clone()),
        abrupt_loss: a
            .and_then(|a| a.abrupt.as_ref())
            .is_some_and(|b| b.suspected),
        flags: flags.into_iter().collect(),
        attention: s.attention.clone(),
        signoff: crate::model::signoff::SignOffState::none(),
    }
}

/// The lines of `turnbook lots`, one per lot with a registration or cycles.
pub fn lot_lines(cfg: &Config) -> NResult<Vec<LotLine>> {
    let conn = store::open(&cfg.database_path())?;
    let mut lines = current_lines(&conn, cfg)?;
    let mut signoffs = super::signoffs::sign_off_states(&conn)?;
    for line in &mut lines {
        if let Some(s) = signoffs.remove(&line.lot) {
            line.signoff = s;
        }
    }
    Ok(lines)
}

/// A lot's state for the commands that show one lot; refused when nothing names the lot.
pub fn known_lot(cfg: &Config, lot: &str) -> NResult<LotState> {
    let conn = store::open(&cfg.database_path())?;
    let s = lot_state(&conn, cfg, lot)?;
    if s.cycles.is_empty() && s.record.is_none() {
        return Err(no_such_lot(lot));
    }
    Ok(s)
}

/// The one wording of "nothing names this lot".
pub fn no_such_lot(lot: &str) -> NotebookError {
    NotebookError::Refused(format!(
        "no lot '{lot}' is registered and no cycle names it"
    ))
}

/// One row of the cycle table (CSV and JSON).
#[derive(Debug, Serialize)]
pub struct CycleLine {
    pub cycle: u32,
    pub batch_id: String,
    pub started_at: Option<String>,
    pub duration_h: Option<f64>,
    pub temperature_c: Option<f64>,
    pub substrate_mol: Option<f64>,
    pub catalyst_charged_g: Option<f64>,
    /// Metal charged (nominal: dry catalyst mass × loading / M, or measured), mmol.
    pub metal_charged_mmol: Option<f64>,
    /// Metal available: the nominal less the metal found in earlier cycles' products, mmol.
    pub metal_available_mmol: Option<f64>,
    /// Catalyst-to-substrate ratio, mol metal per mol limiting substrate.
    pub catalyst_to_substrate: Option<f64>,
    pub conversion: Option<f64>,
    pub selectivity: Option<f64>,
    pub yield_fraction: Option<f64>,
    pub product_mass_g: Option<f64>,
    pub metal_in_product_ug_g: Option<f64>,
    pub catalyst_recovered_g: Option<f64>,
    /// TON per mol of metal charged.
    pub ton: Option<f64>,
    /// TON per mol of metal available to the cycle.
    pub ton_per_metal_available: Option<f64>,
    /// Average TOF: TON / whole reaction time.
    #[serde(rename = "tof_average_per_h")]
    pub tof_per_h: Option<f64>,
    #[serde(rename = "tof_average_per_s")]
    pub tof_per_s: Option<f64>,
    /// Initial TOF: k_app × mol substrate / mol metal (first-order batch); a lower bound
    /// for a censored cycle (flag `initial-tof-lower-bound`).
    pub tof_initial_per_h: Option<f64>,
    pub tof_initial_per_s: Option<f64>,
    pub cumulative_ton: Option<f64>,
    pub k_app_per_h: Option<f64>,
    /// Standard error of k_app from the conversion assay's σ.
    pub k_app_se_per_h: Option<f64>,
    /// Activity on the configured basis (the name says which), relative to the
    /// reference cycle.
    #[serde(skip)]
    pub activity: Option<f64>,
    /// Activity per catalyst-to-substrate ratio (the default basis); empty under the other.
    pub activity_per_catalyst_ratio: Option<f64>,
    /// Activity per mol of metal charged (when so configured); empty otherwise.
    pub activity_per_metal_charged: Option<f64>,
    /// Standard error of activity, first order, the reference cycle's error included.
    pub activity_se: Option<f64>,
    pub metal_lost_mg: Option<f64>,
    pub cumulative_metal_loss_fraction: Option<f64>,
    /// The cycle's flags, as a list like every other output's `flags`.
    pub flags: Vec<String>,
    pub sources: String,
}

/// The average TOF, as tables and JSON define it.
pub const TOF_AVERAGE_DEFINITION: &str = "average TOF = TON / whole reaction time";
/// The initial TOF, as tables and JSON define it (Kozuch & Martin, ACS Catal. 2012, 2,
/// 2787, on TOF definitions; recalled from memory).
pub const TOF_INITIAL_DEFINITION: &str = "initial TOF = k_app × mol limiting substrate / mol \
     metal charged (first-order batch; a lower bound when the cycle is censored)";

/// `cycles LOT --format json` (and `/api/lots/{lot}`): the cycle lines with the
/// definitions of their computed columns.
#[derive(Debug, Serialize)]
pub struct CyclesDocument {
    pub lot: String,
    /// The configured basis of activity, e.g. "catalyst-ratio".
    pub activity_basis: &'static str,
    pub activity_definition: &'static str,
    /// The cycle whose rate is activity 1.
    pub activity_reference_cycle: Option<u32>,
    /// True when cycle 1 is censored and the first uncensored cycle is the reference.
    pub activity_reference_moved: bool,
    pub tof_average_definition: &'static str,
    pub tof_initial_definition: &'static str,
    pub cycles: Vec<CycleLine>,
}

/// The JSON document of a lot's cycles.
pub fn cycles_document(s: &LotState) -> CyclesDocument {
    CyclesDocument {
        lot: s.lot.clone(),
        activity_basis: s.activity_basis.key(),
        activity_definition: s.activity_basis.definition(),
        activity_reference_cycle: s.reference_cycle,
        activity_reference_moved: s.reference_moved,
        tof_average_definition: TOF_AVERAGE_DEFINITION,
        tof_initial_definition: TOF_INITIAL_DEFINITION,
        cycles: cycle_lines(s),
    }
}

pub fn cycle_lines(s: &LotState) -> Vec<CycleLine> {
    s.cycles.iter().map(|c| cycle_line(s, c)).collect()
}

/// The line of one cycle `c` of the lot `s`.
pub fn cycle_line(s: &LotState, c: &CycleState) -> CycleLine {
    let m = c.metrics.as_ref();
    let v = &c.view;
    let activity = m.and_then(|m| m.activity);
    CycleLine {
        cycle: c.cycle,
        batch_id: v.batch_id.clone(),
        started_at: v.started_at.clone(),
        duration_h: v.get(Quantity::Duration).map(|s| s / 3600.0),
        temperature_c: v.get(Quantity::Temperature).map(|k| k - 273.15),
        substrate_mol: v.get(Quantity::Substrate),
        catalyst_charged_g: m.and_then(|m| m.catalyst_charged_g),
        metal_charged_mmol: m.and_then(|m| m.metal_mol).map(|n| n * 1000.0),
        metal_available_mmol: m.and_then(|m| m.metal_available_mol).map(|n| n * 1000.0),
        catalyst_to_substrate: m.and_then(|m| m.catalyst_ratio),
        conversion: v.get(Quantity::Conversion),
        selectivity: v.get(Quantity::Selectivity),
        yield_fraction: m.and_then(|m| m.yield_used),
        product_mass_g: v.get(Quantity::ProductMass),
        metal_in_product_ug_g: v.get(Quantity::MetalInProduct),
        catalyst_recovered_g: v.get(Quantity::CatalystRecovered),
        ton: m.and_then(|m| m.ton),
        ton_per_metal_available: m.and_then(|m| m.ton_available),
        tof_per_h: m.and_then(|m| m.tof_per_h),
        tof_per_s: m.and_then(|m| m.tof_per_s),
        tof_initial_per_h: m.and_then(|m| m.initial_tof_per_h),
        tof_initial_per_s: m.and_then(|m| m.initial_tof_per_s),
        cumulative_ton: m.and_then(|m| m.cumulative_ton),
        k_app_per_h: m.and_then(|m| m.k_app_per_h),
        k_app_se_per_h: m.and_then(|m| m.k_app_se_per_h),
        activity,
        activity_per_catalyst_ratio: activity
            .filter(|_| s.activity_basis == ActivityBasis::CatalystRatio),
        activity_per_metal_charged: activity
            .filter(|_| s.activity_basis == ActivityBasis::MetalCharged),
        activity_se: m.and_then(|m| m.activity_se),
        metal_lost_mg: m.and_then(|m| m.metal_lost_g).map(|g| g * 1000.0),
        cumulative_metal_loss_fraction: m.and_then(|m| m.cumulative_loss_fraction),
        flags: c.flags.clone(),
        sources: c
            .sources
            .iter()
            .map(|s| {
                format!(
                    "{}:{} ({})",
                    s.path,
                    s.lines
                        .iter()
                        .map(|l| l.to_string())
                        .collect::<Vec<_>>()
                        .join(","),
                    &s.sha256[..12.min(s.sha256.len())]
                )
            })
            .collect::<Vec<_>>()
            .join("; "),
    }
}

#[cfg(test)]
mod tests {
    use super::push_sparse;

    #[test]
    fn a_sparse_column_stays_empty_until_a_value_and_then_lines_up() {
        let mut col: Vec<Option<f64>> = Vec::new();
        for (i, v) in [None, None, Some(2.0), None].into_iter().enumerate() {
            push_sparse(&mut col, v, None, i, 4);
        }
        assert_eq!(col, vec![None, None, Some(2.0), None]);
        let mut none: Vec<bool> = Vec::new();
        for i in 0..3 {
            push_sparse(&mut none, false, false, i, 3);
        }
        assert!(none.is_empty());
    }
}
