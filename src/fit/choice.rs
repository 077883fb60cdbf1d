//! Model choice by AICc (Hurvich & Tsai 1989; Burnham & Anderson 2002 for the ΔAICc < 2
//! rule of thumb).

/// RSS below this is treated as this, so an exact fit keeps a finite AICc.
const RSS_FLOOR: f64 = 1e-300;

/// AICc = n·ln(RSS/n) + 2p + 2p(p + 1)/(n − p − 1); None when n ≤ p + 1, where the
/// correction is undefined and the model may not be chosen.
pub fn aicc(n: usize, p: usize, rss: f64) -> Option<f64> {
    if n <= p + 1 || !rss.is_finite() || rss < 0.0 {
        return None;
    }
    let nf = n as f64;
    let pf = p as f64;
    let v =
        nf * (rss.max(RSS_FLOOR) / nf).ln() + 2.0 * pf + 2.0 * pf * (pf + 1.0) / (nf - pf - 1.0);
    v.is_finite().then_some(v)
}

/// One candidate as the choice rule sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Candidate {
    /// Number of parameters.
    pub p: usize,
    /// AICc, None if undefined.
    pub aicc: Option<f64>,
    /// Whether the fit converged to usable values.
    pub usable: bool,
}

/// Index of the chosen candidate: among usable candidates with an AICc, those within
/// ΔAICc < 2 of the best are statistically indistinguishable, and the one with the fewest
/// parameters wins (lowest AICc among equals). None when no candidate qualifies.
pub fn choose(cands: &[Candidate]) -> Option<usize> {
    let best = cands
        .iter()
        .filter(|c| c.usable)
        .filter_map(|c| c.aicc)
        .min_by(|a, b| a.total_cmp(b))?;
    cands
        .iter()
        .enumerate()
        .filter(|(_, c)| c.usable)
        .filter_map(|(i, c)| c.aicc.map(|a| (i, c.p, a)))
        .filter(|&(_, _, a)| a - best < 2.0)
        .min_by(|x, y| x.1.cmp(&y.1).then(x.2.total_cmp(&y.2)))
        .map(|(i, _, _)| i)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn aicc_matches_hand_computation() {
        // n = 10, p = 2, RSS = 0.5: 10·ln(0.05) + 4 + 12/7 (formula of Hurvich & Tsai 1989).
        let want = 10.0 * (0.05f64).ln() + 4.0 + 12.0 / 7.0;
        let got = aicc(10, 2, 0.5).expect("defined");
        assert!((got - want).abs() < 1e-12);
    }

    #[test]
    fn aicc_undefined_when_too_few_points() {
        assert_eq!(aicc(3, 2, 0.1), None);
        assert_eq!(aicc(2, 2, 0.1), None);
        assert!(aicc(4, 2, 0.1).is_some());
        assert!(aicc(4, 2, 0.0).is_some_and(f64::is_finite));
        assert_eq!(aicc(10, 2, f64::NAN), None);
    }

    fn c(p: usize, a: f64) -> Candidate {
        Candidate {
            p,
            aicc: Some(a),
            usable: true,
        }
    }

    #[test]
    fn simplest_within_two_wins() {
        // 3-parameter best by 1.5: the 2-parameter model is preferred.
        assert_eq!(choose(&[c(2, -50.0), c(3, -51.5)]), Some(0));
        // Better by 2.5: the richer model wins.
        assert_eq!(choose(&[c(2, -50.0), c(3, -52.5)]), Some(1));
        // Exactly 2 is not "within < 2".
        assert_eq!(choose(&[c(2, -50.0), c(3, -52.0)]), Some(1));
        // Equal complexity: lower AICc.
        assert_eq!(choose(&[c(2, -50.0), c(2, -50.5), c(5, -51.0)]), Some(1));
    }

    #[test]
    fn unusable_or_undefined_never_chosen() {
        let bad = Candidate {
            p: 1,
            aicc: Some(-1000.0),
            usable: false,
        };
        let undefined = Candidate {
            p: 1,
            aicc: None,
            usable: true,
        };
        assert_eq!(choose(&[bad, undefined, c(3, -5.0)]), Some(2));
        assert_eq!(choose(&[bad, undefined]), None);
        assert_eq!(choose(&[]), None);
    }
}
