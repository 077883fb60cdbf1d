//! "Why did it drop?": a suspect cycle's recorded conditions against the lot's usual ones,
//! and how much of the activity lost the measured metal loss can explain.
//!
//! Usual values are the cycles before the suspect one. A condition deviates when its
//! modified z-score, M = 0.6745·(x − median)/MAD, exceeds 3.5 in size (Iglewicz & Hoaglin,
//! "How to Detect and Handle Outliers", ASQC 1993; the constant and the cut-off are
//! recalled from memory). 0.6745 is the normal quantile that makes MAD/0.6745 estimate σ.
//! When the usual values never varied (MAD = 0, a recipe constant such as a set-point),
//! any change of more than 0.5 % is reported as a deviation from a fixed value.
//!
//! These are hints for a chemist, not a diagnosis: a condition that deviates is worth a
//! look, one that does not is not cleared of blame.

use serde::Serialize;

/// Cut-off of the modified z-score (Iglewicz & Hoaglin 1993, recalled from memory).
pub const MODIFIED_Z_LIMIT: f64 = 3.5;
/// Relative change that counts as a deviation from a value that never varied (a project
/// choice: above the rounding of a typical export).
pub const FIXED_VALUE_TOLERANCE: f64 = 0.005;
/// Fewest usual cycles a comparison needs.
pub const MIN_USUAL: usize = 3;

/// The conditions of one cycle, in canonical units.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Conditions {
    pub cycle: u32,
    pub temperature_k: Option<f64>,
    pub duration_s: Option<f64>,
    pub substrate_mol: Option<f64>,
    /// mol metal charged per mol limiting substrate.
    pub catalyst_ratio: Option<f64>,
    pub metal_in_product_ug_g: Option<f64>,
    /// The substrate or feed lot the batch was charged from.
    pub feed_lot: Option<String>,
}

/// One condition of the suspect cycle that differs from the lot's usual value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Deviation {
    /// What it is, in words ("temperature").
    pub what: &'static str,
    /// The suspect cycle's value and the usual (median) one, in `unit`.
    pub value: f64,
    pub usual: f64,
    pub unit: &'static str,
    /// The modified z-score; None when the usual values never varied.
    pub z: Option<f64>,
}

impl Deviation {
    /// "temperature 70.0 °C (usual 60.0 °C, z = 8.1)".
    pub fn sentence(&self) -> String {
        let digits = if self.unit == "mol %" { 3 } else { 1 };
        let how = match self.z {
            Some(z) => format!("z = {z:.1}"),
            None => "it never varied before".to_string(),
        };
        format!(
            "{} {:.digits$} {} (usual {:.digits$} {}, {how})",
            self.what, self.value, self.unit, self.usual, self.unit
        )
    }
}

/// The hints for one suspect cycle.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CauseHints {
    pub cycle: u32,
    /// How many earlier cycles set the usual values.
    pub compared_with: usize,
    pub deviations: Vec<Deviation>,
    /// The suspect cycle's feed lot when it is one none of the earlier cycles used, with
    /// the feed lot most of them used.
    pub new_feed_lot: Option<(String, String)>,
    /// Fraction of the fresh activity lost by the suspect cycle (0.40 = 40 %).
    pub activity_lost: Option<f64>,
    /// Fraction of the metal charged that the products carried away before this cycle.
    pub metal_lost: Option<f64>,
    /// The share of the activity lost that the metal loss can explain (activity per mol
    /// of metal charged falls at most in proportion to the metal lost), capped at 1.
    pub metal_share: Option<f64>,
}

impl CauseHints {
    /// The hints in plain sentences, one per line.
    pub fn lines(&self) -> Vec<String> {
        let mut out = Vec::new();
        if let Some((new, usual)) = &self.new_feed_lot {
            out.push(format!(
                "Cycle {} was charged from feed lot {new}, which none of the {} cycles before \
                 it used (they mostly used {usual}): check that feed lot first.",
                self.cycle, self.compared_with
            ));
        }
        if self.deviations.is_empty() && self.new_feed_lot.is_none() {
            out.push(format!(
                "Cycle {}: no recorded condition differs from the {} cycles before it \
                 (temperature, time, substrate, catalyst-to-substrate ratio, metal in \
                 product, feed lot); look at what is not recorded (a poison, handling).",
                self.cycle, self.compared_with
            ));
        } else if !self.deviations.is_empty() {
            let parts: Vec<String> = self.deviations.iter().map(Deviation::sentence).collect();
            out.push(format!(
                "Cycle {} differs from the {} cycles before it in: {}.",
                self.cycle,
                self.compared_with,
                parts.join("; ")
            ));
        }
        match (self.activity_lost, self.metal_lost, self.metal_share) {
            (Some(a), Some(m), Some(s)) => out.push(format!(
                "Metal loss explains at most {} % of the activity lost ({:.1} % of the metal \
                 charged was carried away; {:.0} % of the fresh activity is lost).",
                if s < 0.1 {
                    format!("{:.1}", 100.0 * s)
                } else {
                    format!("{:.0}", 100.0 * s)
                },
                100.0 * m,
                100.0 * a
            )),
            (Some(_), None, _) => out.push(
                "No metal-in-product results: how much leaching explains is unknown.".to_string(),
            ),
            _ => {}
        }
        out
    }
}

fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    })
}

/// A condition to compare: its name, display unit, how to read it and how to show it.
type Check = (
    &'static str,
    &'static str,
    fn(&Conditions) -> Option<f64>,
    fn(f64) -> f64,
);

/// The suspect value against the usual ones: Some(deviation) when it stands out.
fn deviation(
    what: &'static str,
    unit: &'static str,
    scale: impl Fn(f64) -> f64,
    usual: &[f64],
    x: f64,
) -> Option<Deviation> {
    let mut u: Vec<f64> = usual.iter().copied().filter(|v| v.is_finite()).collect();
    if u.len() < MIN_USUAL || !x.is_finite() {
        return None;
    }
    let med = median(&mut u)?;
    let mut dev: Vec<f64> = u.iter().map(|v| (v - med).abs()).collect();
    let mad = median(&mut dev)?;
    let z = if mad > 0.0 {
        let z = 0.6745 * (x - med) / mad;
        if z.abs() <= MODIFIED_Z_LIMIT {
            return None;
        }
        Some(z)
    } else {
        let rel = if med != 0.0 {
            ((x - med) / med).abs()
        } else {
            x.abs()
        };
        if rel <= FIXED_VALUE_TOLERANCE {
            return None;
        }
        None
    };
    Some(Deviation {
        what,
        value: scale(x),
        usual: scale(med),
        unit,
        z,
    })
}

/// The conditions to compare: name, display unit, how to read them and how to show them.
fn checks() -> [Check; 5] {
    [
        ("temperature", "°C", |c| c.temperature_k, |k| k - 273.15),
        ("reaction time", "min", |c| c.duration_s, |s| s / 60.0),
        (
            "substrate charged",
            "mmol",
            |c| c.substrate_mol,
            |m| m * 1000.0,
        ),
        (
            "catalyst-to-substrate ratio",
            "mol %",
            |c| c.catalyst_ratio,
            |r| r * 100.0,
        ),
        (
            "metal in product",
            "µg/g",
            |c| c.metal_in_product_ug_g,
            |v| v,
        ),
    ]
}

/// What [`cause_hints`] needs of a lot's cycles, gathered one cycle at a time: the usual
/// values of the cycles before the suspect one and the suspect's own conditions. A lot of
/// 200,000 cycles is then a few columns of numbers, not a list of every cycle's record.
#[derive(Debug, Clone)]
pub struct HintsInput {
    suspect: u32,
    /// Per check, the finite values of the cycles before the suspect (the only ones a
    /// comparison uses).
    usual: [Vec<f64>; 5],
    /// How many cycles before the suspect were charged from each feed lot.
    feed_lots: std::collections::BTreeMap<String, usize>,
    before: usize,
    at_suspect: Option<Conditions>,
}

impl HintsInput {
    pub fn new(suspect: u32) -> Self {
        Self {
            suspect,
            usual: Default::default(),
            feed_lots: Default::default(),
            before: 0,
            at_suspect: None,
        }
    }

    /// One cycle, in the lot's order; the first record of the suspect cycle counts.
    pub fn add(&mut self, c: &Conditions) {
        if c.cycle < self.suspect {
            self.before += 1;
            for (column, (_, _, get, _)) in self.usual.iter_mut().zip(checks()) {
                column.extend(get(c).filter(|v| v.is_finite()));
            }
            if let Some(b) = c.feed_lot.as_deref() {
                match self.feed_lots.get_mut(b) {
                    Some(n) => *n += 1,
                    None => {
                        self.feed_lots.insert(b.to_string(), 1);
                    }
                }
            }
        } else if c.cycle == self.suspect && self.at_suspect.is_none() {
            self.at_suspect = Some(c.clone());
        }
    }

    /// The hints, given the suspect cycle's activity (relative to fresh) and the
    /// cumulative fraction of the metal charged lost before it.
    pub fn finish(
        self,
        activity_at_suspect: Option<f64>,
        metal_lost_before: Option<f64>,
    ) -> Option<CauseHints> {
        let s = self.at_suspect.as_ref()?;
        if self.before < MIN_USUAL {
            return None;
        }
        let mut deviations = Vec::new();
        for ((what, unit, get, scale), usual) in checks().into_iter().zip(&self.usual) {
            if let Some(x) = get(s)
                && let Some(d) = deviation(what, unit, scale, usual, x)
            {
                deviations.push(d);
            }
        }
        let new_feed_lot = s.feed_lot.as_ref().and_then(|f| {
            let counts = &self.feed_lots;
            let usual = counts.iter().max_by_key(|(_, n)| **n).map(|(k, _)| k)?;
            (!counts.contains_key(f.as_str())).then(|| (f.clone(), usual.clone()))
        });
        let activity_lost = activity_at_suspect
            .filter(|a| a.is_finite())
            .map(|a| (1.0 - a).max(0.0));
        let metal_share = match (activity_lost, metal_lost_before) {
            (Some(a), Some(m)) if a > 0.0 && m.is_finite() && m >= 0.0 => Some((m / a).min(1.0)),
            _ => None,
        };
        Some(CauseHints {
            cycle: self.suspect,
            compared_with: self.before,
            deviations,
            new_feed_lot,
            activity_lost,
            metal_lost: metal_lost_before,
            metal_share,
        })
    }
}

/// Compare cycle `suspect` with the cycles before it. `activity_of` gives a cycle's
/// activity (relative to fresh), `metal_lost_before` the cumulative fraction of the metal
/// charged lost before the suspect cycle.
pub fn cause_hints(
    history: &[Conditions],
    suspect: u32,
    activity_of: impl Fn(u32) -> Option<f64>,
    metal_lost_before: Option<f64>,
) -> Option<CauseHints> {
    let mut input = HintsInput::new(suspect);
    for c in history {
        input.add(c);
    }
    input.finish(activity_of(suspect), metal_lost_before)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cycle(n: u32, t_c: f64, ratio: f64, ug: f64) -> Conditions {
        Conditions {
            cycle: n,
            temperature_k: Some(t_c + 273.15),
            duration_s: Some(7200.0),
            substrate_mol: Some(0.1),
            catalyst_ratio: Some(ratio),
            metal_in_product_ug_g: Some(ug),
            feed_lot: Some("D-3".into()),
        }
    }

    /// Worked by hand: temperatures 60.1, 59.8, 60.3, 60.0, 59.9 °C before the suspect
    /// cycle: median 60.0, absolute deviations 0.1, 0.2, 0.3, 0.0, 0.1 → MAD 0.1. The
    /// suspect at 64.0 °C: M = 0.6745 × 4.0 / 0.1 = 26.98 > 3.5, a deviation. The ratio
    /// never varied (0.005 each time) and is 0.005 again: no deviation. Metal in product
    /// 1.0, 1.2, 0.9, 1.1, 1.0 µg/g (median 1.0, MAD 0.1); 1.3 gives M = 2.02: none.
    /// Activity 0.60 (40 % lost) with 2 % of the metal carried away: metal loss explains
    /// at most 0.02/0.40 = 5 %.
    #[test]
    fn a_hot_batch_stands_out_and_leaching_explains_little() {
        let temps = [60.1, 59.8, 60.3, 60.0, 59.9];
        let ugs = [1.0, 1.2, 0.9, 1.1, 1.0];
        let mut h: Vec<Conditions> = (0..5)
            .map(|i| cycle(i as u32 + 1, temps[i], 0.005, ugs[i]))
            .collect();
        h.push(cycle(6, 64.0, 0.005, 1.3));
        let hints = cause_hints(&h, 6, |_| Some(0.60), Some(0.02)).unwrap();
        assert_eq!(hints.compared_with, 5);
        assert_eq!(hints.deviations.len(), 1, "{hints:?}");
        let d = &hints.deviations[0];
        assert_eq!(d.what, "temperature");
        assert!((d.z.unwrap() - 0.6745 * 4.0 / 0.1).abs() < 1e-9);
        assert!((d.value - 64.0).abs() < 1e-9 && (d.usual - 60.0).abs() < 1e-9);
        assert!((hints.metal_share.unwrap() - 0.05).abs() < 1e-12);
        let lines = hints.lines();
        assert!(
            lines[0].contains("temperature 64.0 °C (usual 60.0 °C, z = 27.0)"),
            "{lines:?}"
        );
        assert!(lines[1].contains("at most 5.0 %"), "{lines:?}");
    }

    #[test]
    fn a_changed_recipe_constant_is_reported_and_too_few_cycles_give_nothing() {
        let mut h: Vec<Conditions> = (1..=4).map(|n| cycle(n, 60.0, 0.005, 1.0)).collect();
        // Twice the catalyst per substrate: 0.5 → 1.0 mol %.
        h.push(cycle(5, 60.0, 0.010, 1.0));
        let hints = cause_hints(&h, 5, |_| Some(0.5), None).unwrap();
        assert_eq!(hints.deviations.len(), 1);
        assert_eq!(hints.deviations[0].what, "catalyst-to-substrate ratio");
        assert_eq!(hints.deviations[0].z, None);
        assert!(hints.lines()[0].contains("1.000 mol % (usual 0.500 mol %, it never varied"));
        assert!(hints.lines()[1].contains("unknown"));
        assert!(cause_hints(&h[..3], 3, |_| Some(0.5), None).is_none());
        assert!(cause_hints(&h, 9, |_| Some(0.5), None).is_none());
    }

    #[test]
    fn a_feed_lot_no_earlier_cycle_used_is_named_first() {
        let mut h: Vec<Conditions> = (1..=6).map(|n| cycle(n, 60.0, 0.005, 1.0)).collect();
        h[1].feed_lot = Some("D-4".into());
        h[5].feed_lot = Some("D-7".into());
        let hints = cause_hints(&h, 6, |_| Some(0.6), Some(0.01)).unwrap();
        assert_eq!(hints.new_feed_lot, Some(("D-7".into(), "D-3".into())));
        assert!(hints.deviations.is_empty());
        let lines = hints.lines();
        assert!(
            lines[0].starts_with("Cycle 6 was charged from feed lot D-7"),
            "{lines:?}"
        );
        assert!(
            lines.iter().all(|l| !l.contains("no recorded condition")),
            "{lines:?}"
        );
        // A feed lot used before is no news.
        h[5].feed_lot = Some("D-4".into());
        assert_eq!(
            cause_hints(&h, 6, |_| Some(0.6), None)
                .unwrap()
                .new_feed_lot,
            None
        );
    }
}
