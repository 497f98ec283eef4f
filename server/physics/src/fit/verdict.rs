//! One verdict per map: the transport class, z ± stat ± window and
//! D ± stat ± window in the dataset's units, the estimator it comes from and
//! why, and why the others were set aside.
//!
//! Owns the choice among estimators and the class rules. Must not run any
//! estimator: it reads [`EstimatorLine`]s (one per estimator, each with its
//! standing) and the [`Evidence`] of the map's shape, both prepared by
//! `analysis`.
//!
//! # Choosing the estimator
//! Among the lines that apply (not "does not apply", not saturated, not at
//! a bound of their range, not a poor fit), the first in this order is
//! chosen:
//! 1. the second moment, when the profile has a sharp front (ballistic
//!    evidence): Σ_x x² C(x,t) ∝ t^{2/z} is finite and exact there
//!    (Σ n² J_n(2t)² = 2t² for free fermions), while the stable-law
//!    estimators assume a profile without a front;
//! 2. the lattice-walk fit, when the chain is known: it models the finite
//!    chain, its ends and its saturation, so it uses every time;
//! 3. the scaling collapse: it assumes scaling only, not the shape of the
//!    scaling function, and fits z and D against a smooth master curve;
//! 4. the stable profile fit, when the model comparison prefers it (z = μ
//!    and D from one fit);
//! 5. the autocorrelation tail;
//! 6. the quantile width.
//!
//! The Gaussian profile fixes z = 2 and so never supplies z, only D. The
//! order follows the calibration suite (`calibration`, figures in the
//! README): on seeded copies the collapse, the stable profile and the tail
//! are unbiased within their scatter and cover the truth in 50–90 % of
//! copies; of these the collapse assumes least about the map.
//!
//! # Classes (facts of the trade; physics notes, "Transport classes")
//! With σ = √(stat² + window²) of the chosen z and the tolerance
//! τ = max(3σ, [`CLASS_TOLERANCE`]):
//! - `ballistic`: a sharp front (the profile's peak away from the origin at
//!   most window times) and |z − 1| ≤ τ; free particles, C = J_x(2t)² on the
//!   XX chain, whose C(0,t) oscillates;
//! - `diffusive`: |z − 2| ≤ τ and no front;
//! - `subdiffusive`: z > 2 + τ;
//! - `levy`: z < 2 − τ without a front — a stable profile with heavy tails,
//!   z = μ; a Cauchy flight (z = 1) is told from ballistic motion by the
//!   missing front and the monotone C(0,t);
//! - `undetermined`: no estimator applies, σ > [`MAX_CLASS_ERROR`], or a
//!   front with z far from 1; the reasons say which.
//!
//! Near α = 3/2, when the nominal α is known, a reason says that
//! logarithmic corrections make fitted exponents drift.

use crate::fit::diagnosis::plus_minus;

/// Smallest tolerance of the class rules on z (common practice, no
/// source: lattice effects on accessible scales move fitted exponents by a
/// few hundredths even on exact data).
pub const CLASS_TOLERANCE: f64 = 0.1;
/// Above this total error of z no class is named.
pub const MAX_CLASS_ERROR: f64 = 0.5;
/// Distance, in combined standard errors (stat and window of both), within
/// which another estimator is said to agree with the headline (common
/// practice, no source).
pub const AGREE_WITHIN: f64 = 2.0;
/// |α − 3/2| below which logarithmic corrections are announced.
pub const CROSSOVER_HALF_WIDTH: f64 = 0.15;
/// χ²/dof (or collapse S) above which errors are scaled by √(χ²/dof).
pub const SCALE_ABOVE: f64 = 1.0;
/// χ²/dof (or collapse S) above which an estimate is a poor fit, set aside.
pub const POOR_FIT_ABOVE: f64 = 10.0;

/// The transport class.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TransportClass {
    Ballistic,
    Levy,
    Diffusive,
    Subdiffusive,
    Undetermined,
}

impl TransportClass {
    /// The class in the words of the output.
    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Ballistic => "ballistic",
            Self::Levy => "levy",
            Self::Diffusive => "diffusive",
            Self::Subdiffusive => "subdiffusive",
            Self::Undetermined => "undetermined",
        }
    }
}

/// How D is defined in the output.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DConvention {
    /// s(t) = (D t)^{1/z}: Σ_x C e^{ikx} = exp(−D|k|^z t) (default).
    #[default]
    Rate,
    /// s(t) = D t^{1/z}, i.e. D_here = D_rate^{1/z}.
    Prefactor,
}

impl DConvention {
    /// The definition in words.
    #[must_use]
    pub fn words(self) -> &'static str {
        match self {
            Self::Rate => "D through the scale s(t) = (D t)^{1/z}",
            Self::Prefactor => "D through the scale s(t) = D t^{1/z}",
        }
    }

    /// D and its errors in this convention from the rate convention's
    /// (first-order propagation; z's error is not propagated into D).
    #[must_use]
    pub fn convert(self, d: f64, err: f64, z: f64) -> (f64, f64) {
        match self {
            Self::Rate => (d, err),
            Self::Prefactor => {
                let v = d.powf(1.0 / z);
                (v, v * err / (z * d))
            }
        }
    }

    /// The units of D with time unit `unit`.
    #[must_use]
    pub fn units(self, z: f64, unit: &str) -> String {
        match self {
            Self::Rate => format!("sites^{} per {unit}", short(z)),
            Self::Prefactor => format!("sites per {unit}^(1/{})", short(z)),
        }
    }
}

/// One estimate with its two errors.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Measured {
    pub value: f64,
    /// Statistical 1σ (bootstrap when it ran), already multiplied by
    /// `err_scale`.
    pub err_stat: f64,
    /// Window systematic (spread over the window family); `None` when not
    /// computed.
    pub err_sys: Option<f64>,
    /// Bootstrap 16th–84th percentile interval.
    pub interval: Option<[f64; 2]>,
    /// Bootstrap mean − estimate.
    pub bias: Option<f64>,
    /// Factor (≥ 1) applied to the statistical error for a poor fit.
    pub err_scale: f64,
}

impl Measured {
    /// A value with a statistical error, scaled by √(χ²/dof) when the fit's
    /// χ²/dof (or collapse quality) exceeds [`SCALE_ABOVE`].
    #[must_use]
    pub fn new(value: f64, err_stat: f64, chi2_dof: Option<f64>) -> Self {
        let err_scale = chi2_dof
            .filter(|c| c.is_finite() && *c > SCALE_ABOVE)
            .map_or(1.0, f64::sqrt);
        Self {
            value,
            err_stat: err_stat * err_scale,
            err_sys: None,
            interval: None,
            bias: None,
            err_scale,
        }
    }

    /// √(stat² + window²).
    #[must_use]
    pub fn total_err(&self) -> f64 {
        self.err_stat.hypot(self.err_sys.unwrap_or(0.0))
    }

    /// "1.304 ± 0.0005 (stat) ± 0.004 (window)".
    #[must_use]
    pub fn text(&self) -> String {
        two_errors(self.value, self.err_stat, self.err_sys)
    }
}

/// "value ± stat (stat) ± sys (window)", both errors to two significant
/// digits and the value to the finer of their decimal places.
#[must_use]
pub fn two_errors(value: f64, stat: f64, sys: Option<f64>) -> String {
    let base = plus_minus(value, stat);
    match sys {
        Some(s) if s.is_finite() => {
            let digits = if s > 0.0 {
                (1 - s.log10().floor() as i32).clamp(0, 12) as usize
            } else {
                4
            };
            format!("{base} (stat) ± {s:.digits$} (window)")
        }
        _ => format!("{base} (stat)"),
    }
}

/// Whether an estimator's number may stand beside the others.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Standing {
    Applies,
    /// The estimator's assumptions fail on this map (e.g. weight leaves
    /// the window of the width estimator).
    NotApplicable,
    /// The window lies in the finite chain's saturated regime.
    Saturated,
    /// The estimate sits on a bound of its search range.
    AtBound,
    /// χ²/dof (or S) above [`POOR_FIT_ABOVE`].
    PoorFit,
    /// The estimator failed to run.
    Failed,
}

/// One estimator's line of the table.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct EstimatorLine {
    /// The estimator in words ("scaling collapse", …).
    pub name: &'static str,
    pub z: Option<Measured>,
    /// D in the rate convention, sites^z per time unit.
    #[serde(rename = "D")]
    pub d: Option<Measured>,
    pub standing: Standing,
    /// Why it does not apply, or the goodness of fit, in words.
    pub detail: String,
}

/// What the map's shape says beyond the exponents.
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct Evidence {
    /// The profile's peak lies away from the origin (|x| ≥ 2, above C(0,t)
    /// by three errors) at most times of the window: a sharp front.
    pub front: bool,
    /// C(0,t) rises again beyond its errors over the usable range.
    pub oscillating: bool,
    /// Nominal coupling exponent α, when the metadata give it.
    pub nominal_alpha: Option<f64>,
}

/// The headline of a map (JSON keys of the command line's `verdict`).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Verdict {
    pub class: TransportClass,
    pub z: Option<f64>,
    pub z_err_stat: Option<f64>,
    pub z_err_sys: Option<f64>,
    #[serde(rename = "D")]
    pub d: Option<f64>,
    #[serde(rename = "D_err_stat")]
    pub d_err_stat: Option<f64>,
    #[serde(rename = "D_err_sys")]
    pub d_err_sys: Option<f64>,
    #[serde(rename = "D_units")]
    pub d_units: String,
    #[serde(rename = "D_convention")]
    pub d_convention: &'static str,
    /// The chosen estimator ("" when none applies).
    pub estimator: String,
    /// Why it was chosen.
    pub why: String,
    /// Why the class was named (or not), and why every other estimator
    /// was set aside.
    pub reasons: Vec<String>,
    /// The headline in one line.
    pub headline: String,
}

const ORDER: [&str; 6] = [
    "second moment",
    "lattice-walk fit",
    "scaling collapse",
    "stable profile",
    "autocorrelation tail",
    "quantile width",
];

fn why_chosen(name: &str) -> &'static str {
    match name {
        "second moment" => {
            "the profile has a sharp front, so its second moment is finite and grows as t^(2/z)"
        }
        "lattice-walk fit" => {
            "the chain is known and the walk models its ends and saturation, using every time"
        }
        "scaling collapse" => {
            "every time of the window falls on one master curve; it assumes scaling, not the \
             shape of the scaling function"
        }
        "stable profile" => {
            "the model comparison prefers the stable law, which gives z = μ and D in one fit"
        }
        "autocorrelation tail" => {
            "C(0,t) ∝ t^(−1/z) holds in the window (the Gaussian profile, preferred, fixes z = 2)"
        }
        _ => "the only estimator that applies",
    }
}

/// Decides the verdict from the lines and the evidence. D is taken from
/// the chosen line, else from the first applicable profile line.
#[must_use]
pub fn decide(
    lines: &[EstimatorLine],
    evidence: Evidence,
    convention: DConvention,
    time_unit: &str,
) -> Verdict {
    let applies = |l: &&EstimatorLine| l.standing == Standing::Applies && l.z.is_some();
    let chosen = ORDER.iter().find_map(|name| {
        lines
            .iter()
            .filter(applies)
            .find(|l| l.name == *name)
            .filter(|l| l.name != "second moment" || evidence.front)
    });
    let mut reasons = Vec::new();
    for l in lines {
        if chosen.is_some_and(|c| c.name == l.name) {
            continue;
        }
        let why = match l.standing {
            Standing::Applies if l.name == "second moment" && !evidence.front => {
                "not used: no sharp front (the second moment of a heavy-tailed profile is cut by the window)".to_string()
            }
            Standing::Applies => match (&l.z, chosen.and_then(|c| c.z.as_ref())) {
                (Some(z), Some(head)) => {
                    // Both errors of both estimates: the headline's window
                    // error counts as much as its noise.
                    let sigma = z.total_err().hypot(head.total_err());
                    let off = (z.value - head.value).abs() / sigma;
                    if off <= AGREE_WITHIN {
                        format!("z = {}, agrees with the headline ({off:.1}σ)", z.text())
                    } else {
                        format!(
                            "z = {}, disagrees with the headline by {off:.1}σ \
                             (a drift of the local exponent or a model that does not fit)",
                            z.text()
                        )
                    }
                }
                (Some(z), None) => format!("z = {}", z.text()),
                (None, _) => "gives no z".to_string(),
            },
            Standing::NotApplicable => format!("does not apply: {}", l.detail),
            Standing::Saturated => format!("set aside, saturated regime: {}", l.detail),
            Standing::AtBound => format!("set aside, at a bound: {}", l.detail),
            Standing::PoorFit => format!("set aside, poor fit: {}", l.detail),
            Standing::Failed => format!("failed: {}", l.detail),
        };
        reasons.push(format!("{}: {why}", l.name));
    }
    if let Some(alpha) = evidence.nominal_alpha {
        if (alpha - 1.5).abs() < CROSSOVER_HALF_WIDTH {
            reasons.insert(
                0,
                format!(
                    "nominal α = {} is near 3/2, where logarithmic corrections are expected: \
                     fitted exponents drift with the window, read z as an effective exponent",
                    short(alpha)
                ),
            );
        }
    }
    let Some(line) = chosen else {
        reasons.insert(0, "no estimator applies to this map".to_string());
        return Verdict {
            class: TransportClass::Undetermined,
            z: None,
            z_err_stat: None,
            z_err_sys: None,
            d: None,
            d_err_stat: None,
            d_err_sys: None,
            d_units: String::new(),
            d_convention: convention.words(),
            estimator: String::new(),
            why: String::new(),
            headline: "undetermined: no estimator applies".to_string(),
            reasons,
        };
    };
    let z = line.z.unwrap_or(Measured::new(f64::NAN, f64::NAN, None));
    let sigma = z.total_err();
    let tol = (3.0 * sigma).max(CLASS_TOLERANCE);
    let (class, class_reason) = if !(sigma.is_finite() && sigma <= MAX_CLASS_ERROR) {
        (
            TransportClass::Undetermined,
            format!(
                "the error of z ({}) is too large to name a class",
                short(sigma)
            ),
        )
    } else if evidence.front {
        if (z.value - 1.0).abs() <= tol {
            (
                TransportClass::Ballistic,
                format!(
                    "sharp front{} and z within {} of 1: ballistic, as free particles",
                    if evidence.oscillating {
                        " and oscillating C(0,t)"
                    } else {
                        ""
                    },
                    short(tol)
                ),
            )
        } else {
            (
                TransportClass::Undetermined,
                "a sharp front but z far from 1: neither free particles nor a stable law"
                    .to_string(),
            )
        }
    } else if (z.value - 2.0).abs() <= tol {
        (
            TransportClass::Diffusive,
            format!(
                "z within {} of 2 and no front: diffusive (Gaussian)",
                short(tol)
            ),
        )
    } else if z.value > 2.0 {
        (
            TransportClass::Subdiffusive,
            format!("z above 2 by more than {}", short(tol)),
        )
    } else {
        let cauchy = if (z.value - 1.0).abs() <= tol {
            ": z ≈ 1 without a front and with a monotone C(0,t), a Cauchy-like flight, not ballistic"
        } else {
            ""
        };
        (
            TransportClass::Levy,
            format!(
                "z below 2 by more than {} and no front: Lévy flight, z = μ{cauchy}",
                short(tol)
            ),
        )
    };
    reasons.insert(0, class_reason);
    let d_source = line.d.or_else(|| {
        ["stable profile", "Gaussian profile"].iter().find_map(|n| {
            lines
                .iter()
                .filter(applies)
                .find(|l| l.name == *n)
                .and_then(|l| l.d)
        })
    });
    let d = d_source.filter(|_| class != TransportClass::Ballistic && z.value.is_finite());
    if class == TransportClass::Ballistic {
        reasons.push(
            "D is not given: a ballistic profile is not a stable law, so exp(−D|k|^z t) does not define it"
                .to_string(),
        );
    }
    let (dv, ds, dw) = match d {
        Some(m) => {
            let (v, s) = convention.convert(m.value, m.err_stat, z.value);
            let w = m.err_sys.map(|e| convention.convert(m.value, e, z.value).1);
            (Some(v), Some(s), w)
        }
        None => (None, None, None),
    };
    let d_units = convention.units(z.value, time_unit);
    let mut headline = format!("{}: z = {}", class.name(), z.text());
    if let (Some(v), Some(s)) = (dv, ds) {
        let _ = std::fmt::Write::write_fmt(
            &mut headline,
            format_args!(", D = {} {d_units}", two_errors(v, s, dw)),
        );
    }
    let _ = std::fmt::Write::write_fmt(&mut headline, format_args!(" (from the {})", line.name));
    Verdict {
        class,
        z: Some(z.value),
        z_err_stat: Some(z.err_stat),
        z_err_sys: z.err_sys,
        d: dv,
        d_err_stat: ds,
        d_err_sys: dw,
        d_units,
        d_convention: convention.words(),
        estimator: line.name.to_string(),
        why: why_chosen(line.name).to_string(),
        reasons,
        headline,
    }
}

fn short(v: f64) -> String {
    let s = format!("{v:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(name: &'static str, z: f64, err: f64, standing: Standing) -> EstimatorLine {
        EstimatorLine {
            name,
            z: Some(Measured {
                err_sys: Some(err / 2.0),
                ..Measured::new(z, err, None)
            }),
            d: None,
            standing,
            detail: "test".into(),
        }
    }

    #[test]
    fn other_estimators_are_said_to_agree_or_disagree_by_their_combined_errors() {
        // Headline 1.30 ± 0.01 (stat) ± 0.005 (window), total error
        // √(0.01² + 0.005²) = 0.01118 for each line, 0.01581 for a pair: the
        // tail 1.32 is 1.3σ away, the width 1.50 is 12.6σ away.
        let lines = [
            line("stable profile", 1.30, 0.01, Standing::Applies),
            line("autocorrelation tail", 1.32, 0.01, Standing::Applies),
            line("quantile width", 1.50, 0.01, Standing::Applies),
        ];
        let v = decide(&lines, Evidence::default(), DConvention::Rate, "1/J");
        assert_eq!(v.estimator, "stable profile");
        let said = |name: &str| {
            v.reasons
                .iter()
                .find(|r| r.starts_with(name))
                .cloned()
                .unwrap_or_default()
        };
        assert!(
            said("autocorrelation tail").contains("agrees with the headline (1.3σ)"),
            "{v:?}"
        );
        assert!(
            said("quantile width").contains("disagrees with the headline by 12.6σ"),
            "{v:?}"
        );
    }

    #[test]
    fn classes_follow_the_rules_of_the_module_documentation() {
        let e = Evidence::default();
        let v = decide(
            &[line("scaling collapse", 2.01, 0.01, Standing::Applies)],
            e,
            DConvention::Rate,
            "1/J",
        );
        assert_eq!(v.class, TransportClass::Diffusive);
        let v = decide(
            &[line("scaling collapse", 1.3, 0.01, Standing::Applies)],
            e,
            DConvention::Rate,
            "1/J",
        );
        assert_eq!(v.class, TransportClass::Levy);
        let v = decide(
            &[line("scaling collapse", 2.6, 0.01, Standing::Applies)],
            e,
            DConvention::Rate,
            "1/J",
        );
        assert_eq!(v.class, TransportClass::Subdiffusive);
        // A front decides between Cauchy (levy) and ballistic at z = 1.
        let front = Evidence {
            front: true,
            oscillating: true,
            nominal_alpha: None,
        };
        let lines = [
            line("second moment", 1.0, 0.01, Standing::Applies),
            line("scaling collapse", 0.92, 0.01, Standing::Applies),
        ];
        assert_eq!(
            decide(&lines, front, DConvention::Rate, "1/J").class,
            TransportClass::Ballistic
        );
        let v = decide(&lines, e, DConvention::Rate, "1/J");
        assert_eq!(v.class, TransportClass::Levy);
        assert_eq!(v.estimator, "scaling collapse");
        assert!(!v.reasons.is_empty());
    }

    #[test]
    fn set_aside_lines_say_why_and_nothing_applicable_is_undetermined() {
        let lines = [
            line("quantile width", 1.5, 0.001, Standing::NotApplicable),
            line("scaling collapse", 3.0, 0.1, Standing::AtBound),
        ];
        let v = decide(&lines, Evidence::default(), DConvention::Rate, "1/J");
        assert_eq!(v.class, TransportClass::Undetermined);
        assert!(v.z.is_none());
        assert!(v.reasons.iter().any(|r| r.contains("does not apply")));
        assert!(v.reasons.iter().any(|r| r.contains("at a bound")));
    }

    #[test]
    fn crossover_and_d_convention() {
        let mut l = line("stable profile", 1.9, 0.01, Standing::Applies);
        l.d = Some(Measured::new(4.0, 0.4, None));
        let e = Evidence {
            nominal_alpha: Some(1.45),
            ..Evidence::default()
        };
        let v = decide(&[l.clone()], e, DConvention::Rate, "ms");
        assert!(v.reasons.iter().any(|r| r.contains("logarithmic")));
        assert_eq!(v.d, Some(4.0));
        assert!(v.d_units.contains("ms"));
        // s = D' t^{1/z} with D' = D^{1/z}: 4^{1/1.9} by hand.
        let p = decide(&[l], e, DConvention::Prefactor, "ms");
        assert!((p.d.expect("D") - 4f64.powf(1.0 / 1.9)).abs() < 1e-12);
        assert!(p.d_convention.contains("D t^{1/z}"));
    }

    #[test]
    fn poor_fits_scale_their_errors() {
        let m = Measured::new(1.0, 0.01, Some(16.0));
        assert!((m.err_stat - 0.04).abs() < 1e-15);
        assert!((m.err_scale - 4.0).abs() < 1e-15);
        assert_eq!(
            two_errors(1.304, 0.0005, Some(0.004)),
            "1.30400 ± 0.00050 (stat) ± 0.0040 (window)"
        );
    }
}
