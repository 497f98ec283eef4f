//! What an analysis takes and gives: its options, the report with one
//! section per estimator, the verdict and the windows, and why it could not
//! start.

use super::*;

/// Settings of [`analyze`](super::analyze).
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisOptions {
    /// Earliest time of every window (replaces the default's lower end).
    pub t_min: Option<f64>,
    /// Latest time of every window.
    pub t_max: Option<f64>,
    /// Largest |x| used by the fits.
    pub x_max: Option<i32>,
    /// Chain length N: enables the lattice-walk fit and the chain-edge check.
    pub sites: Option<usize>,
    /// Source site j; `None` infers it when the map's offsets span exactly N
    /// sites, and assumes the centre (N − 1)/2 otherwise.
    pub source: Option<usize>,
    /// The window of sources the map averages (with `sites`; replaces
    /// `source`).
    pub average: Option<SourceAverage>,
    /// Bootstrap replicates for the collapse and the profile fits.
    pub bootstrap: usize,
    pub seed: u64,
    /// Nominal coupling exponent α (metadata), for the crossover remark
    /// and the reference line 2α − 1.
    pub alpha: Option<f64>,
    /// Unit of the time axis, for D's units.
    pub time_unit: String,
    /// How D is written in the verdict.
    pub d_convention: DConvention,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        Self {
            t_min: None,
            t_max: None,
            x_max: None,
            sites: None,
            source: None,
            average: None,
            bootstrap: DEFAULT_BOOTSTRAP,
            seed: 0,
            alpha: None,
            time_unit: "time unit".to_string(),
            d_convention: DConvention::Rate,
        }
    }
}

/// Σ_x C(x,t) over the scaling window's times.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SumRuleSummary {
    pub min: f64,
    pub max: f64,
    pub points: Vec<SumRulePoint>,
}

/// What was loaded.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DatasetSummary {
    /// Number of site offsets in the map.
    pub sites: usize,
    /// Number of times.
    pub times: usize,
    pub offsets: [i32; 2],
    pub t_range: [f64; 2],
    /// Grid points not measured.
    pub missing: usize,
    pub errors_known: bool,
    pub sum_rule: SumRuleSummary,
}

/// The windows the estimators used and how they were chosen.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Windows {
    /// Scaling window [t_min, t_max] (tail, width, collapse, profile).
    pub t_window: [f64; 2],
    pub x_max: Option<i32>,
    /// How the scaling window was chosen, in words.
    pub rule: String,
    /// What ended the usable range.
    pub end: WindowEnd,
    /// `false` when no asymptotic regime was found (saturated or too short).
    pub asymptotic: bool,
    /// Chain length and source used by the lattice-walk fit and the edge
    /// check.
    pub chain_sites: Option<usize>,
    pub source: Option<usize>,
    /// The window of sources the map averages, when it does.
    pub source_average: Option<SourceAverage>,
    /// How the chain was obtained, in words.
    pub source_basis: Option<&'static str>,
    /// The neighbouring windows of the window error.
    pub family: Vec<FamilyMember>,
}

/// The autocorrelation tail and its local exponent.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AutocorrelationSection {
    #[serde(flatten)]
    pub fit: TailReport,
    /// −d ln C(0,t)/d ln t over the whole map.
    pub local_exponent: Vec<LocalExponent>,
}

/// The collapse with its quality under the short key `quality`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CollapseSection {
    #[serde(flatten)]
    pub fit: CollapseReport,
    /// S at the minimum (Houdayer–Hartmann; ≈ 1 for a good collapse).
    pub quality: f64,
}

/// The preferred profile fit, and both fits with the comparison when the
/// stable fit ran.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProfileSection {
    #[serde(flatten)]
    pub preferred: ProfileReport,
    pub comparison: Option<ProfileComparison>,
}

/// One point of z_eff(t) = 1/(−d ln C(0,t)/d ln t).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct EffectiveExponent {
    pub t: f64,
    pub z: f64,
    /// First-order error err(s)/s² of the local exponent s; `None` without
    /// errors.
    pub err: Option<f64>,
}

/// One window start of the z-versus-window-start scan (window end fixed
/// at the scaling window's end).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ScanPoint {
    pub t_start: f64,
    /// Tail fit on [t_start, t_end].
    pub tail: Option<[f64; 2]>,
    /// Collapse (no bootstrap) on [t_start, t_end].
    pub collapse: Option<[f64; 2]>,
}

/// The local exponent as a picture: z_eff(t) with its errors, the scan, and
/// the reference lines z = 1, 2 and 2α − 1 (when α is known).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LocalExponentPicture {
    pub z_eff: Vec<EffectiveExponent>,
    pub scan: Vec<ScanPoint>,
    pub t_end: f64,
    /// (label, z) of the reference lines.
    pub references: Vec<(String, f64)>,
}

/// Result of [`analyze`]. Sections are `None` when their estimator could
/// not run; the reason is then among the warnings.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AnalysisReport {
    pub conventions: &'static str,
    /// The headline: class, z ± stat ± window, D ± stat ± window.
    pub verdict: Verdict,
    pub dataset: DatasetSummary,
    pub windows: Windows,
    /// One line per estimator with both errors and its standing.
    pub estimators: Vec<EstimatorLine>,
    pub evidence: Evidence,
    pub autocorrelation: Option<AutocorrelationSection>,
    pub width: Option<WidthReport>,
    pub collapse: Option<CollapseSection>,
    pub profile: Option<ProfileSection>,
    /// Present only when the chain is known.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lattice_walk: Option<LatticeWalkFitReport>,
    pub short_time: Option<ShortTimeReport>,
    pub local_exponent_picture: LocalExponentPicture,
    pub warnings: Vec<Warning>,
    /// Informational remarks that are not warnings.
    pub notes: Vec<String>,
    pub bootstrap: usize,
    pub seed: u64,
    pub d_convention: &'static str,
}

/// Why the analysis could not start at all (every estimator failing is not
/// an error: the report then carries the warnings).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    #[error("t_min = {t_min} is not below t_max = {t_max}")]
    BadTimeRange { t_min: f64, t_max: f64 },
    #[error("x_max = {0} must be ≥ 0")]
    BadXMax(i32),
    #[error("source site {source_site} is given without the chain length (sites)")]
    SourceWithoutSites { source_site: usize },
    #[error("source site {source_site} is outside the chain of {sites} sites")]
    SourceOutOfRange { source_site: usize, sites: usize },
    #[error("the window holds no data: {0}")]
    EmptyWindow(#[from] crate::MapError),
    #[error("the analysis was cancelled")]
    Cancelled,
}
