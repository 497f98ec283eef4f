//! The one window rule: which times and offsets the asymptotic estimators
//! (tail, width, collapse, profile) see when the user sets no window, and
//! the family of neighbouring windows whose spread is the window
//! systematic error. The command line, the fits route, the dashboard's
//! default chips and the report all take their windows from here.
//!
//! Owns the rule and its words. Must not know estimators, files or
//! requests: a map and the user's bounds in, a [`WindowChoice`] out.
//!
//! # The rule
//! 1. **Chain.** The chain length N and source j are taken as given; when
//!    they are not given and the map holds every offset of a chain (its
//!    offsets run over one contiguous block containing 0) with the sum rule
//!    Σ_x C(x,t) within [`SUM_RULE_TOLERANCE`] (plus three standard errors)
//!    of 1 at every time, the map is taken to cover the chain: N = number
//!    of offsets, j = −x_min.
//! 2. **Signal.** The usable times are the times t > 0 from the first on
//!    while the profile's peak max_x C(x,t) is above noise (C > 3 δC with
//!    errors, C > 0 without). The peak is C(0,t) for diffusion and Lévy
//!    flights; for a ballistic profile it rides on the front, whereas
//!    C(0,t) passes through zeros.
//! 3. **Saturation.** On a known chain C relaxes to the plateau 1/N. The
//!    usable range ends before the peak first drops below
//!    [`SATURATION_FACTOR`]/N: beyond it the excess over the plateau is no
//!    larger than the plateau itself and no asymptotic law holds.
//! 4. **Ends.** The usable range ends before the weight within the outer
//!    tenth of the chain (or of the measured offsets, when the chain is not
//!    known) first exceeds 5 % of the total (the same edge zone and
//!    fraction as the diagnosis, `diagnosis::edge_fraction`).
//! 5. **Late half.** With [t_a, t_b] the usable range, the window is
//!    [√(t_a t_b), t_b]: early times carry the microscopic, non-universal
//!    dynamics, and the scaling form is a late-time statement. When that
//!    holds fewer than [`MIN_TIMES`] times, the whole usable range is used;
//!    when even that holds fewer, the map has no asymptotic regime
//!    (`asymptotic = false`) and the window is the usable range or, if
//!    empty, every time t > 0, marked as such.
//!
//! The user's `t_min`, `t_max` and `x_max` replace the rule's ends one by
//! one (a given end is never moved, and is returned as given).
//!
//! # Window family (systematic error)
//! The neighbouring windows are: t_min × f and t_min / f, t_max / f (an
//! earlier end only, since later ones may leave the asymptotic regime) with
//! f = [`FAMILY_FACTOR`], and x_max = ⌊3/4 · x_extent⌋ (a narrower space
//! window). Members holding fewer than [`MIN_TIMES`] times are dropped.
//! The window error of an estimate is the root-mean-square deviation of its
//! value over the family from its value in the chosen window (common
//! practice, no source; the calibration suite checks the coverage of stat
//! and window errors combined in quadrature).

use crate::CorrelationMap;
use crate::fit::diagnosis::{EDGE_FRACTION, Edges, SUM_RULE_TOLERANCE, edge_fraction};
use crate::fit::lattice_walk_fit::SourceAverage;

/// Fewest times a scaling window must hold.
pub const MIN_TIMES: usize = 3;
/// C(0,t) below this multiple of the plateau 1/N counts as saturated.
pub const SATURATION_FACTOR: f64 = 2.0;
/// Factor by which the window family moves t_min and t_max.
pub const FAMILY_FACTOR: f64 = 1.5;
/// Bootstrap resamples used by default by every caller (command line, fits
/// route, dashboard): one number, shown with every result.
pub const DEFAULT_BOOTSTRAP: usize = 100;

/// How the chain (length and source) is known.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ChainBasis {
    /// Length and source given (option or metadata).
    Given,
    /// Length given, source inferred from the offsets.
    SourceFromOffsets,
    /// Length given, source assumed at the centre.
    SourceAtCentre,
    /// Neither given: the map covers every offset of a chain and the sum
    /// rule holds over them.
    InferredFromMap,
}

impl ChainBasis {
    /// In words, for tables and cards.
    #[must_use]
    pub fn words(self) -> &'static str {
        match self {
            Self::Given => "given",
            Self::SourceFromOffsets => "source inferred from the offsets",
            Self::SourceAtCentre => "source assumed at the centre",
            Self::InferredFromMap => {
                "inferred: the map covers every offset of the chain and Σ_x C ≈ 1"
            }
        }
    }
}

/// A chain of `sites` sites seen from `source`, or from the window of
/// sources `average` when the map is a mean over several (then `source` is
/// the window's first).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub struct Chain {
    pub sites: usize,
    pub source: usize,
    pub basis: ChainBasis,
    pub average: Option<SourceAverage>,
}

impl Chain {
    /// The chain's ends as offsets: for a window of sources, the nearest
    /// ends any source of it sees (−first and N − 1 − last; the nearer of
    /// the two on both sides when symmetrised).
    #[must_use]
    pub fn edges(&self) -> Edges {
        match self.average {
            None => Edges::of_chain(self.sites, self.source),
            Some(a) => {
                let left = a.first as i64;
                let right = self.sites as i64 - 1 - a.last as i64;
                let (left, right) = if a.symmetrised {
                    (left.min(right), left.min(right))
                } else {
                    (left, right)
                };
                Edges {
                    left: -i32::try_from(left).unwrap_or(i32::MAX),
                    right: i32::try_from(right).unwrap_or(i32::MAX),
                    chain: true,
                }
            }
        }
    }
}

/// The user's bounds (each optional).
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct Bounds {
    pub t_min: Option<f64>,
    pub t_max: Option<f64>,
    pub x_max: Option<i32>,
}

impl Bounds {
    fn contains(&self, t: f64) -> bool {
        self.t_min.is_none_or(|a| t >= a) && self.t_max.is_none_or(|b| t <= b)
    }
}

/// What limited the end of the usable range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum WindowEnd {
    /// The last time of the map (or the user's t_max).
    Data,
    /// C(0,t) reached noise.
    Noise,
    /// C(0,t) approached the plateau 1/N.
    Saturation,
    /// The spread reached the chain's (or the map's) ends.
    Edges,
}

/// The windows chosen by the rule.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WindowChoice {
    /// The scaling window's first and last time (actual times of the map).
    pub t_min: f64,
    pub t_max: f64,
    /// Largest |x| (the user's, or `None` for all offsets).
    pub x_max: Option<i32>,
    /// Usable range before noise, saturation and edges, [t_a, t_b].
    pub usable: Option<[f64; 2]>,
    pub end: WindowEnd,
    /// `false` when the map has no stretch of at least [`MIN_TIMES`] times
    /// before saturation or the edges: asymptotic estimators do not apply.
    pub asymptotic: bool,
    pub chain: Option<Chain>,
    /// How the window was chosen, in words.
    pub rule: String,
}

impl WindowChoice {
    /// The window as bounds.
    #[must_use]
    pub fn bounds(&self) -> Bounds {
        Bounds {
            t_min: Some(self.t_min),
            t_max: Some(self.t_max),
            x_max: self.x_max,
        }
    }
}

/// One member of the window family.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct FamilyMember {
    /// What was changed, in words ("t_min × 1.5", …).
    pub change: &'static str,
    pub bounds: Bounds,
}

/// Infers the chain when `sites` is not given (rule 1), or completes the
/// given one; a window of sources (`average`) counts only with `sites`.
#[must_use]
pub fn chain_of(
    map: &CorrelationMap,
    sites: Option<usize>,
    source: Option<usize>,
    average: Option<SourceAverage>,
) -> Option<Chain> {
    let x = map.offsets();
    let (first, last) = (x[0], x[x.len() - 1]);
    let contiguous = i64::from(last) - i64::from(first) + 1 == x.len() as i64;
    if let (Some(sites), Some(a)) = (sites, average) {
        return Some(Chain {
            sites,
            source: a.first,
            basis: ChainBasis::Given,
            average: Some(a),
        });
    }
    if let Some(sites) = sites {
        let (source, basis) = match source {
            Some(s) => (s, ChainBasis::Given),
            None if first <= 0 && contiguous && x.len() == sites => {
                (first.unsigned_abs() as usize, ChainBasis::SourceFromOffsets)
            }
            None => (sites.saturating_sub(1) / 2, ChainBasis::SourceAtCentre),
        };
        return Some(Chain {
            sites,
            source,
            basis,
            average: None,
        });
    }
    if !(contiguous && first <= 0 && last >= 0 && map.n_missing() == 0 && x.len() >= 3) {
        return None;
    }
    let holds = map.sum_rule().iter().all(|p| {
        let slack = SUM_RULE_TOLERANCE + 3.0 * p.err.unwrap_or(0.0);
        (p.sum - 1.0).abs() <= slack
    });
    holds.then(|| Chain {
        sites: x.len(),
        source: first.unsigned_abs() as usize,
        basis: ChainBasis::InferredFromMap,
        average: None,
    })
}

/// The scaling window of `map` by the rule of the module documentation.
#[must_use]
pub fn choose(map: &CorrelationMap, bounds: Bounds, chain: Option<Chain>) -> WindowChoice {
    let edges = chain.map_or_else(|| Edges::of_map(map), |c| c.edges());
    let plateau = chain.map(|c| 1.0 / c.sites as f64);
    let noise_words = if map.errors().is_some() {
        "the peak of C > 3 δC"
    } else {
        "the peak of C > 0"
    };
    let mut usable: Vec<f64> = Vec::new();
    let mut end = WindowEnd::Data;
    for (ti, &t) in map.times().iter().enumerate() {
        if !(t > 0.0 && bounds.contains(t)) {
            continue;
        }
        let Some((c, e)) = peak(map, ti) else {
            continue;
        };
        if !(c > 3.0 * e && c > 0.0) {
            end = WindowEnd::Noise;
            break;
        }
        if plateau.is_some_and(|p| c < SATURATION_FACTOR * p) {
            end = WindowEnd::Saturation;
            break;
        }
        if edge_fraction(map, ti, edges).is_some_and(|f| f > EDGE_FRACTION) {
            end = WindowEnd::Edges;
            break;
        }
        usable.push(t);
    }
    let given = given_words(bounds);
    let end_words = match end {
        WindowEnd::Data => "the last time",
        WindowEnd::Noise => "the signal reaching noise",
        WindowEnd::Saturation => "the profile approaching the plateau 1/N",
        WindowEnd::Edges => "the spread reaching the ends",
    };
    let fallback = |why: &str| {
        let all: Vec<f64> = map
            .times()
            .iter()
            .copied()
            .filter(|&t| t > 0.0 && bounds.contains(t))
            .collect();
        let (a, b) = match (usable.first(), usable.last(), all.first(), all.last()) {
            (Some(&a), Some(&b), _, _) => (a, b),
            (_, _, Some(&a), Some(&b)) => (a, b),
            _ => (map.times()[0], map.times()[map.n_times() - 1]),
        };
        WindowChoice {
            t_min: bounds.t_min.unwrap_or(a),
            t_max: bounds.t_max.unwrap_or(b),
            x_max: bounds.x_max,
            usable: usable.first().zip(usable.last()).map(|(&a, &b)| [a, b]),
            end,
            asymptotic: false,
            chain,
            rule: format!("no asymptotic regime: {why}{given}"),
        }
    };
    if usable.len() < MIN_TIMES {
        return fallback(&format!(
            "fewer than {MIN_TIMES} times with {noise_words} before {end_words}"
        ));
    }
    let (ta, tb) = (usable[0], usable[usable.len() - 1]);
    let lower = bounds.t_min.map_or((ta * tb).sqrt(), |_| ta);
    let late: Vec<f64> = usable.iter().copied().filter(|&t| t >= lower).collect();
    let (t_min, words) = if late.len() >= MIN_TIMES {
        let how = if bounds.t_min.is_some() {
            "from the given start"
        } else {
            "late-time half of the log-time range"
        };
        (late[0], how)
    } else {
        (ta, "whole usable range (its late half holds too few times)")
    };
    WindowChoice {
        t_min: bounds.t_min.unwrap_or(t_min),
        t_max: bounds.t_max.unwrap_or(tb),
        x_max: bounds.x_max,
        usable: Some([ta, tb]),
        end,
        asymptotic: true,
        chain,
        rule: format!(
            "{words} where {noise_words} (t = {}..{}), ended by {end_words}{given}",
            short(ta),
            short(tb)
        ),
    }
}

/// The neighbouring windows of `choice` (module documentation), each with
/// at least [`MIN_TIMES`] times of `map`.
#[must_use]
pub fn family(map: &CorrelationMap, choice: &WindowChoice) -> Vec<FamilyMember> {
    let base = choice.bounds();
    let f = FAMILY_FACTOR;
    let extent = map
        .offsets()
        .iter()
        .map(|x| x.unsigned_abs())
        .max()
        .unwrap_or(0);
    let extent = choice
        .x_max
        .map_or(extent, |x| x.unsigned_abs().min(extent));
    let narrower = i32::try_from(extent * 3 / 4).unwrap_or(i32::MAX);
    let mut members = vec![
        FamilyMember {
            change: "t_min × 1.5",
            bounds: Bounds {
                t_min: Some(choice.t_min * f),
                ..base
            },
        },
        FamilyMember {
            change: "t_min ÷ 1.5",
            bounds: Bounds {
                t_min: Some(choice.t_min / f),
                ..base
            },
        },
        FamilyMember {
            change: "t_max ÷ 1.5",
            bounds: Bounds {
                t_max: Some(choice.t_max / f),
                ..base
            },
        },
    ];
    if narrower >= 2 {
        members.push(FamilyMember {
            change: "x_max × 3/4",
            bounds: Bounds {
                x_max: Some(narrower),
                ..base
            },
        });
    }
    members.retain(|m| {
        map.times()
            .iter()
            .filter(|&&t| t > 0.0 && m.bounds.contains(t))
            .count()
            >= MIN_TIMES
    });
    members
}

/// The window error: root-mean-square deviation of `values` (the
/// estimate over the family, failed members left out) from `nominal`;
/// `None` when no member gave a value.
#[must_use]
pub fn window_error(nominal: f64, values: &[f64]) -> Option<f64> {
    let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if finite.is_empty() {
        return None;
    }
    let ms = finite.iter().map(|v| (v - nominal).powi(2)).sum::<f64>() / finite.len() as f64;
    Some(ms.sqrt())
}

/// The largest value of the profile at time index `ti` and its error (0
/// without errors). The peak rather than C(0,t) is used so that a ballistic
/// profile, whose maximum rides on the front and whose C(0,t) passes
/// through zeros, is not cut at the first zero.
fn peak(map: &CorrelationMap, ti: usize) -> Option<(f64, f64)> {
    (0..map.n_sites())
        .filter_map(|xi| map.get(ti, xi))
        .map(|(c, e)| (c, e.unwrap_or(0.0)))
        .max_by(|a, b| a.0.total_cmp(&b.0))
}

fn given_words(bounds: Bounds) -> String {
    let mut parts = Vec::new();
    if let Some(a) = bounds.t_min {
        parts.push(format!("t ≥ {a} as given"));
    }
    if let Some(b) = bounds.t_max {
        parts.push(format!("t ≤ {b} as given"));
    }
    if let Some(x) = bounds.x_max {
        parts.push(format!("|x| ≤ {x} as given"));
    }
    if parts.is_empty() {
        String::new()
    } else {
        format!("; {}", parts.join(", "))
    }
}

fn short(v: f64) -> String {
    let s = format!("{v:.4}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::lattice_walk::LatticeWalk;
    use crate::testing::{gaussian, log_times};
    use ndarray::Array2;

    #[test]
    fn finite_chain_window_ends_before_saturation_and_the_ends() {
        // Lattice walk on 61 sites, α = 0.9, times 0.1–50: C(0,t) relaxes to
        // 1/61 (the plateau of the uniform distribution, Σ_x C = 1 on a
        // closed chain: invariant of the master equation). The chain is
        // inferred from the map, and the window ends before C(0,t) < 2/61
        // and before 5 % of the weight sits in the outer tenth.
        let times = log_times(0.1, 50.0, 30);
        let walk = LatticeWalk::power_law(61, 1.0, 0.9).expect("walk");
        let exact = walk.propagate(30, &times).expect("propagates");
        let x = (-30..=30).collect();
        let map = CorrelationMap::complete(x, times, exact, None).expect("map");
        let chain = chain_of(&map, None, None, None).expect("chain inferred");
        assert_eq!((chain.sites, chain.source), (61, 30));
        assert_eq!(chain.basis, ChainBasis::InferredFromMap);
        let choice = choose(&map, Bounds::default(), Some(chain));
        let ti = map
            .times()
            .iter()
            .position(|&t| (t - choice.t_max).abs() < 1e-12)
            .expect("a time");
        let c0 = map.values()[(ti, 30)];
        assert!(c0 >= SATURATION_FACTOR / 61.0, "{choice:?}");
        let edges = Edges::of_chain(61, 30);
        assert!(edge_fraction(&map, ti, edges).expect("fraction") <= EDGE_FRACTION);
        assert!(choice.t_max < 50.0, "{choice:?}");
        assert_ne!(choice.end, WindowEnd::Data, "{choice:?}");
    }

    #[test]
    fn infinite_chain_map_keeps_late_half_and_no_chain_when_weight_leaves() {
        // Gaussian C(x,t) with D = 0.5 (closed form, variance 2Dt) on
        // |x| ≤ 10, times 1–100: at late times weight leaves the offsets, so
        // the sum rule fails and no chain is inferred; the window ends by
        // the edges, before t = 100.
        let x: Vec<i32> = (-10..=10).collect();
        let times = log_times(1.0, 100.0, 20);
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            gaussian(f64::from(x[j]), times[i], 0.5)
        });
        let map = CorrelationMap::complete(x, times, values, None).expect("map");
        assert!(chain_of(&map, None, None, None).is_none());
        let choice = choose(&map, Bounds::default(), None);
        assert_eq!(choice.end, WindowEnd::Edges);
        assert!(choice.asymptotic);
        let [ta, tb] = choice.usable.expect("usable");
        assert!((choice.t_min - (ta * tb).sqrt()).abs() < 0.5 * choice.t_min);
        // A given start replaces the lower end only.
        let given = choose(
            &map,
            Bounds {
                t_min: Some(2.0),
                ..Bounds::default()
            },
            None,
        );
        assert!((given.t_min - 2.0).abs() < 1e-12, "{given:?}");
        assert!((given.t_max - tb).abs() < 1e-12);
        // The family moves each end and narrows x.
        let members = family(&map, &choice);
        assert!(members.iter().any(|m| m.change.starts_with("x_max")));
        assert!(members.len() >= 3, "{members:?}");
    }

    #[test]
    fn window_error_is_the_rms_deviation() {
        // √(((1.1−1)² + (0.9−1)²)/2) = 0.1 by hand.
        let e = window_error(1.0, &[1.1, 0.9, f64::NAN]).expect("value");
        assert!((e - 0.1).abs() < 1e-12);
        assert!(window_error(1.0, &[]).is_none());
    }
}
