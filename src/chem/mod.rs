//! Chemistry of catalyst reuse: TON, TOF, apparent rate constants, activity, Arrhenius
//! normalisation, metal leaching and ICH Q3D limits. Pure functions over plain data.
//!
//! - [`elements`]: molar masses of the catalyst metals.
//! - [`kinetics`]: the per-batch formulas, each with its source named.
//! - [`limits`]: ICH Q3D permitted daily exposures and concentration limits.
//! - [`metrics`]: [`lot_metrics`], the call that turns a lot's cycles into metrics.
//! - [`uncertainty`]: the assay's σ carried to k_app and activity.
//! - [`cause`]: a suspect cycle's conditions against the lot's usual ones.

pub mod cause;
pub mod elements;
pub mod kinetics;
pub mod limits;
pub mod lot_check;
pub mod metrics;
pub mod uncertainty;

pub use elements::{METALS, molar_mass};
pub use kinetics::{
    DEFAULT_SATURATION, GAS_CONSTANT, RateConstant, Tof, apparent_rate_constant,
    arrhenius_to_reference, derived_yield, dry_mass_g, initial_turnover_frequency, metal_lost_g,
    metal_mol, product_mol, turnover_frequency, turnover_number,
};
pub use limits::{OPTION1_DAILY_DOSE_G, Pde, PdeTable, Route, ich_q3d_pde, option1_limit_ug_per_g};
pub use lot_check::{LotField, LotProblem, check_lot, described_wet, lot_warnings};
pub use metrics::{
    ActivityBasis, BasisScan, ChargeSource, ChemOptions, CycleInput, CycleMetrics,
    DEFAULT_RATIO_TOLERANCE, LotBasis, LotFacts, LotMetrics, MetricsPass, cycle_metrics,
    lot_metrics,
};
pub use uncertainty::{AssayUncertainty, rate_constant_se};
