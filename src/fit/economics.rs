//! The economic replacement point: the number of cycles N that minimises the average cost
//! per unit of product, (C + N·c)/Σₙ Pₙ, with Pₙ = P₁·y(n)/y(1) from the fitted model (a
//! renewal-cost argument, common practice in replacement policy).

use serde::{Deserialize, Serialize};

use super::engine::FitResult;

/// Upper limit of the policy horizon, so that a wild input cannot exhaust memory.
pub const MAX_CYCLES: usize = 100_000;

/// Costs of a lot and its use.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EconomicInputs {
    /// Lot cost C, net of the metal refining credit.
    pub lot_cost: f64,
    /// Fixed cost per cycle c.
    pub cost_per_cycle: f64,
    /// Product of the first cycle P₁ (e.g. kg).
    pub product_first_cycle: f64,
    /// Largest N considered (capped at [`MAX_CYCLES`]).
    pub max_cycles: usize,
    /// Currency code of the costs ("EUR"), shown beside them.
    #[serde(default)]
    pub currency: Option<String>,
}

/// The minimum of the average cost.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EconomicResult {
    /// N minimising the average cost.
    pub best_cycles: usize,
    /// Average cost per unit of product at N.
    pub best_average_cost: f64,
    /// Average cost for N = 1..=max considered (index 0 is N = 1).
    pub average_cost: Vec<f64>,
    /// True when the minimum is at the last N considered (no interior minimum).
    pub at_horizon: bool,
    /// Currency code of the costs, from the inputs.
    #[serde(default)]
    pub currency: Option<String>,
}

/// Evaluates the replacement policy on the fitted activity. None when the inputs are not
/// positive and finite or the fitted activity at cycle 1 is not positive.
pub fn economic_replacement(fit: &FitResult, inp: &EconomicInputs) -> Option<EconomicResult> {
    let ok = |v: f64| v.is_finite() && v >= 0.0;
    let product_ok = inp.product_first_cycle > 0.0 && inp.product_first_cycle.is_finite();
    if !(ok(inp.lot_cost) && ok(inp.cost_per_cycle) && product_ok) || inp.max_cycles == 0 {
        return None;
    }
    let y1 = fit.predict(1.0);
    if !(y1 > 0.0 && y1.is_finite()) {
        return None;
    }
    let mut total_product = 0.0;
    let mut average_cost = Vec::new();
    for n in 1..=inp.max_cycles.min(MAX_CYCLES) {
        let y = fit.predict(n as f64);
        let pn = inp.product_first_cycle * y / y1;
        // A cycle with no fitted activity makes no product: stop the policy there.
        if !(pn > 0.0 && pn.is_finite()) {
            break;
        }
        total_product += pn;
        average_cost.push((inp.lot_cost + n as f64 * inp.cost_per_cycle) / total_product);
    }
    let (i, &best) = average_cost
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))?;
    Some(EconomicResult {
        best_cycles: i + 1,
        best_average_cost: best,
        at_horizon: i + 1 == average_cost.len(),
        average_cost,
        currency: inp.currency.clone(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::{FitOptions, ModelId, fit_model};

    #[test]
    fn minimum_matches_brute_force_on_first_order() {
        let x: Vec<f64> = (1..=10).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|&v| (-0.1 * v).exp()).collect();
        let f = fit_model(ModelId::FirstOrder, &x, &y, &FitOptions::default()).expect("fit");
        let inp = EconomicInputs {
            lot_cost: 5000.0,
            cost_per_cycle: 300.0,
            product_first_cycle: 100.0,
            max_cycles: 200,
            currency: None,
        };
        let r = economic_replacement(&f, &inp).expect("defined");
        // Independent evaluation in closed form: Pₙ = 100·q^(n−1), q = e^(−0.1).
        let q = (-0.1f64).exp();
        let avg = |n: usize| {
            let prod = 100.0 * (1.0 - q.powi(n as i32)) / (1.0 - q);
            (5000.0 + 300.0 * n as f64) / prod
        };
        let want = (1..=200)
            .min_by(|&a, &b| avg(a).total_cmp(&avg(b)))
            .unwrap_or(0);
        assert_eq!(r.best_cycles, want);
        assert!((r.best_average_cost - avg(want)).abs() < 1e-6 * avg(want));
        assert!(!r.at_horizon);
        assert!(
            economic_replacement(
                &f,
                &EconomicInputs {
                    product_first_cycle: 0.0,
                    ..inp.clone()
                }
            )
            .is_none()
        );
    }
}
