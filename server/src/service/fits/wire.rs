//! The fits route's request and answer: which estimator, its windows and
//! options (unknown fields refused by name), and the envelope every fit
//! returns and a pin stores — parameters with their errors, quality, the
//! estimator's full report and the curves to draw. Serialised by serde at
//! the edge; nothing here is assembled as loose JSON.

use super::*;

/// The estimators a client may ask for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FitMethod {
    Tail,
    Width,
    Collapse,
    Profile,
    LatticeWalk,
    ShortTime,
    Analysis,
}

impl FitMethod {
    /// The options this estimator reads (every method also takes `sites`
    /// and `source`, which place the chain for the window rule).
    #[must_use]
    pub fn options(self) -> &'static [&'static str] {
        match self {
            Self::Tail => &["sites", "source"],
            Self::Width => &["q", "sites", "source"],
            Self::Collapse => &[
                "z_min",
                "z_max",
                "bootstrap",
                "seed",
                "d_convention",
                "sites",
                "source",
            ],
            Self::Profile => &[
                "model",
                "bootstrap",
                "seed",
                "d_convention",
                "sites",
                "source",
            ],
            Self::LatticeWalk => &["sites", "source"],
            Self::ShortTime => &["order", "sites", "source"],
            Self::Analysis => &["bootstrap", "seed", "d_convention", "sites", "source"],
        }
    }

    /// Refuses, by name, options given to an estimator that does not read
    /// them (a setting silently ignored reads as a setting applied).
    ///
    /// # Errors
    /// BadRequest naming the option and what the method takes.
    pub fn check_given(self, given: &[String]) -> ServiceResult<()> {
        match given.iter().find(|g| !self.options().contains(&g.as_str())) {
            Some(unused) => Err(ServiceError::BadRequest(format!(
                "option `{unused}` does not apply to {}; it takes {}",
                self.words(),
                self.options().join(", ")
            ))),
            None => Ok(()),
        }
    }

    /// The estimator in words.
    #[must_use]
    pub fn words(self) -> &'static str {
        match self {
            Self::Tail => "the autocorrelation tail fit",
            Self::Width => "the width fit",
            Self::Collapse => "the scaling collapse",
            Self::Profile => "the profile fit",
            Self::LatticeWalk => "the lattice-walk fit",
            Self::ShortTime => "the short-time check",
            Self::Analysis => "the analysis",
        }
    }
}

/// Which scaling function the profile fit uses.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ProfileChoice {
    Gaussian,
    Stable,
    /// Both, with a model preference by AIC and BIC.
    #[default]
    Compare,
}

/// The space–time window a fit sees.
#[derive(Debug, Clone, Copy, Default, PartialEq, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct Windows {
    pub t_min: Option<f64>,
    pub t_max: Option<f64>,
    pub x_max: Option<i32>,
}

impl Windows {
    pub(super) fn check(&self) -> ServiceResult<()> {
        for (name, v) in [("t_min", self.t_min), ("t_max", self.t_max)] {
            if v.is_some_and(|v| !v.is_finite() || v < 0.0) {
                return Err(ServiceError::BadRequest(format!(
                    "field `windows.{name}`: must be a finite time ≥ 0"
                )));
            }
        }
        if let (Some(a), Some(b)) = (self.t_min, self.t_max) {
            if a > b {
                return Err(ServiceError::BadRequest(
                    "field `windows.t_min`: larger than `t_max`".into(),
                ));
            }
        }
        if self.x_max.is_some_and(|x| x < 0) {
            return Err(ServiceError::BadRequest(
                "field `windows.x_max`: must be ≥ 0".into(),
            ));
        }
        Ok(())
    }

    /// The sub-map in the window.
    pub(crate) fn apply(&self, map: &CorrelationMap) -> ServiceResult<CorrelationMap> {
        self.check()?;
        map.window(self.t_min, self.t_max, self.x_max)
            .map_err(|e| ServiceError::BadRequest(format!("field `windows`: {e}")))
    }
}

/// Method-specific settings; unknown fields are refused by name.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitOptions {
    /// Quantile of the width fit (weight fraction inside ±w).
    #[serde(default = "half")]
    pub q: f64,
    /// Range searched by the collapse.
    #[serde(default = "z_low")]
    pub z_min: f64,
    #[serde(default = "z_high")]
    pub z_max: f64,
    /// Bootstrap resamples (collapse; profile).
    #[serde(default = "resamples")]
    pub bootstrap: usize,
    /// Seed of every random number.
    #[serde(default)]
    pub seed: u64,
    /// Profile fit: Gaussian, stable or both.
    #[serde(default)]
    pub model: ProfileChoice,
    /// Chain length and source (lattice-walk fit, analysis); default from
    /// the dataset's metadata.
    #[serde(default)]
    pub sites: Option<usize>,
    #[serde(default)]
    pub source: Option<usize>,
    /// Short-time check: order of the polynomial in t (2 or 4).
    #[serde(default)]
    pub order: Option<usize>,
    /// How D is written: `rate`, s(t) = (D t)^{1/z} (default), or
    /// `prefactor`, s(t) = D t^{1/z}.
    #[serde(default)]
    pub d_convention: DConvention,
}

pub(super) fn half() -> f64 {
    0.5
}
pub(super) fn z_low() -> f64 {
    0.5
}
pub(super) fn z_high() -> f64 {
    3.0
}
pub(super) fn resamples() -> usize {
    DEFAULT_BOOTSTRAP
}

impl Default for FitOptions {
    fn default() -> Self {
        Self {
            q: half(),
            z_min: z_low(),
            z_max: z_high(),
            bootstrap: resamples(),
            seed: 0,
            model: ProfileChoice::Compare,
            sites: None,
            source: None,
            order: None,
            d_convention: DConvention::Rate,
        }
    }
}

/// A request to run one estimator.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitRequest {
    pub method: FitMethod,
    #[serde(default)]
    pub windows: Windows,
    #[serde(default)]
    pub options: Option<FitOptions>,
    /// Client-chosen id for progress events and cancellation.
    #[serde(default)]
    pub job: Option<String>,
}

/// One fitted parameter: `err` is the statistical 1σ, `err_sys` the
/// window systematic (spread over the window family), `interval` the
/// bootstrap 16th–84th percentiles, `bias` bootstrap mean − estimate.
#[derive(Debug, Clone, Serialize)]
pub struct Parameter {
    pub value: f64,
    pub err: Option<f64>,
    pub err_bootstrap: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub err_sys: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interval: Option<[f64; 2]>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bias: Option<f64>,
    /// Held fixed by the model (e.g. μ = 2 of the Gaussian profile).
    pub fixed: bool,
}

/// The envelope every fit returns (and a pinned entry stores).
#[derive(Debug, Clone, Serialize)]
pub struct FitResult {
    pub method: FitMethod,
    pub dataset: i64,
    pub dataset_name: String,
    pub dataset_hash: String,
    /// The windows actually used (never empty: the rule fills what the
    /// request left open).
    pub windows: Windows,
    /// How the windows were chosen, in words.
    pub window_rule: String,
    /// Bootstrap resamples used.
    pub bootstrap: usize,
    /// How D is defined in this result.
    pub d_convention: &'static str,
    pub seed: Option<u64>,
    pub parameters: BTreeMap<String, Parameter>,
    pub quality: Quality,
    pub termination: String,
    pub warnings: Vec<String>,
    pub program_version: &'static str,
    pub conventions: &'static str,
    /// The estimator's full report.
    pub report: FitReport,
    /// Curves to draw over the data, computed from the fitted parameters:
    /// `tail` `{t, C}` (the fitted C(0,t) law), `profile` `{x, t, C}` (the
    /// fitted model on the window's grid) and `residual` `{x, t, values,
    /// err}` (data − model).
    pub overlay: Option<Overlay>,
    /// The headline (only for `analysis`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub verdict: Option<Verdict>,
}

/// How good a fit is, and the choices it made; a field is absent where the
/// estimator does not have it.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Quality {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub chi2_dof: Option<f64>,
    /// Present (possibly null: no data errors) for the tail fit only.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_value: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub collapse_quality: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_points: Option<usize>,
    /// Transport class of the verdict (analysis).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub class: Option<String>,
    /// The estimator the verdict took (analysis).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub estimator: Option<String>,
    /// The profile model the comparison preferred.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub preferred: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub delta_aic: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub delta_bic: Option<f64>,
    /// The profile model fitted.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub model: Option<String>,
}

/// The estimator's full report, as the physics crate gives it.
#[derive(Debug, Clone, Serialize)]
#[serde(untagged)]
pub enum FitReport {
    Tail(Box<TailWithLocal>),
    Width(Box<WidthReport>),
    Collapse(Box<CollapseReport>),
    Profile(Box<ProfileReport>),
    ProfileComparison(Box<ProfileComparison>),
    LatticeWalk(Box<LatticeWalkFitReport>),
    ShortTime(Box<ShortTimeReport>),
    Analysis(Box<AnalysisWithText>),
}

/// The tail fit with the local exponent over the whole map.
#[derive(Debug, Clone, Serialize)]
pub struct TailWithLocal {
    #[serde(flatten)]
    pub report: TailReport,
    pub local_exponent: Vec<LocalExponent>,
}

/// The analysis with its plain-text table.
#[derive(Debug, Clone, Serialize)]
pub struct AnalysisWithText {
    #[serde(flatten)]
    pub report: AnalysisReport,
    pub text: String,
}

/// Curves to draw over the data.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Overlay {
    /// The fitted C(0,t) law.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub tail: Option<TailCurve>,
    /// The fitted model on the window's grid.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub profile: Option<GridCurve>,
    /// Data − model on the same grid.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub residual: Option<ResidualGrid>,
}

/// C(0,t) of a fitted law at `t`.
#[derive(Debug, Clone, Serialize)]
pub struct TailCurve {
    pub t: Vec<f64>,
    #[serde(rename = "C")]
    pub c: Vec<f64>,
}

/// A model C(x,t), `[time][offset]`.
#[derive(Debug, Clone, Serialize)]
pub struct GridCurve {
    pub x: Vec<i32>,
    pub t: Vec<f64>,
    #[serde(rename = "C")]
    pub c: Vec<Vec<f64>>,
}

/// Data − model, `[time][offset]`, null where the data are missing.
#[derive(Debug, Clone, Serialize)]
pub struct ResidualGrid {
    pub x: Vec<i32>,
    pub t: Vec<f64>,
    pub values: Vec<Vec<Option<f64>>>,
    pub err: Option<Vec<Vec<Option<f64>>>>,
}
