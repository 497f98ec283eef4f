//! Shot records in a session: an uploaded shot file is kept as it came
//! (so the estimator can be re-run with other options) and its correlation
//! map becomes a dataset whose notes carry the estimator's provenance.
//! Also the option spellings shared by the API and `spreadscope correlate`.

use serde::Deserialize;
use spreadscope_physics::model::shots::{
    EstimateOptions, Readout, ShotEstimate, SourceWindow, estimate,
};

use super::{Access, DatasetSummary, Service, ServiceError, ServiceResult, content_hash, now_utc};
use crate::dataset::DatasetMeta;
use crate::ingest::shots::{ShotFormat, ShotsIngested};
use crate::store::NewDataset;

/// Estimator options as people type them (query string or command line).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShotOptions {
    /// One source site j.
    pub source: Option<usize>,
    /// A bulk window of sources `A:B` (inclusive).
    pub bulk: Option<String>,
    /// Global readout confusion `p01,p10` (p(0|1), p(1|0)).
    pub readout: Option<String>,
    /// Calibrate the readout from the t = 0 shots.
    #[serde(default)]
    pub readout_from_t0: bool,
    #[serde(default)]
    pub symmetrise: bool,
    #[serde(default)]
    pub renormalise: bool,
    pub bootstrap: Option<usize>,
    pub seed: Option<u64>,
}

impl ShotOptions {
    /// The estimator's options; errors name the option.
    ///
    /// # Errors
    /// Conflicting or malformed options.
    pub fn to_estimate_options(&self) -> Result<EstimateOptions, String> {
        let window = match (self.source, &self.bulk) {
            (Some(_), Some(_)) => return Err("`source` and `bulk`: give one or the other".into()),
            (Some(j), None) => SourceWindow::Single(j),
            (None, Some(text)) => {
                let (a, b) = text
                    .split_once(':')
                    .ok_or_else(|| format!("`bulk` `{text}`: expected A:B"))?;
                let parse = |s: &str| {
                    s.trim()
                        .parse::<usize>()
                        .map_err(|_| format!("`bulk` `{text}`: `{s}` is not a site index"))
                };
                let (first, last) = (parse(a)?, parse(b)?);
                if first > last {
                    return Err(format!("`bulk` `{text}`: A must not exceed B"));
                }
                SourceWindow::Bulk { first, last }
            }
            (None, None) => SourceWindow::Central,
        };
        let readout = match (&self.readout, self.readout_from_t0) {
            (Some(_), true) => {
                return Err("`readout` and `readout_from_t0`: give one or the other".into());
            }
            (Some(text), false) => {
                let (a, b) = text
                    .split_once(',')
                    .ok_or_else(|| format!("`readout` `{text}`: expected p01,p10"))?;
                let parse = |s: &str| -> Result<f64, String> {
                    let v: f64 = s
                        .trim()
                        .parse()
                        .map_err(|_| format!("`readout` `{text}`: `{s}` is not a number"))?;
                    if (0.0..0.5).contains(&v) {
                        Ok(v)
                    } else {
                        Err(format!(
                            "`readout` `{text}`: {v} is not a probability below 1/2"
                        ))
                    }
                };
                Readout::Global {
                    p01: parse(a)?,
                    p10: parse(b)?,
                }
            }
            (None, true) => Readout::FromTimeZero { per_site: true },
            (None, false) => Readout::None,
        };
        let defaults = EstimateOptions::default();
        Ok(EstimateOptions {
            window,
            readout,
            symmetrise: self.symmetrise,
            renormalise: self.renormalise,
            replicates: self.bootstrap.unwrap_or(defaults.replicates),
            seed: self.seed.unwrap_or(defaults.seed),
        })
    }
}

/// Parses shot bytes and runs the estimator (pure; the caller decides where).
///
/// # Errors
/// Rejected files (every problem) or estimator refusals (BadRequest).
pub fn correlate(
    bytes: &[u8],
    format: ShotFormat,
    options: &ShotOptions,
) -> ServiceResult<(ShotsIngested, ShotEstimate)> {
    let settings = options
        .to_estimate_options()
        .map_err(ServiceError::BadRequest)?;
    let ingested = crate::ingest::shots::parse(bytes, format).map_err(ServiceError::Invalid)?;
    let result = estimate(&ingested.records, &settings)
        .map_err(|e| ServiceError::BadRequest(format!("estimator: {e}")))?;
    Ok((ingested, result))
}

impl Service {
    /// Stores a shot file and the correlation dataset estimated from it.
    ///
    /// # Errors
    /// Forbidden for view links; Invalid with every problem of the file;
    /// BadRequest naming the option; Busy.
    pub async fn add_shots(
        &self,
        access: &Access,
        name: &str,
        format: ShotFormat,
        bytes: Vec<u8>,
        options: ShotOptions,
    ) -> ServiceResult<DatasetSummary> {
        access.require_edit()?;
        let name = super::validate_name(name)?;
        let session_id = access.session.id;
        let format_label = match format {
            ShotFormat::Csv => "shots-csv",
            ShotFormat::Npz => "shots-npz",
            ShotFormat::Hdf5 => "shots-h5",
        };
        let (bytes, result, ingested) = self
            .heavy(move || {
                let (ingested, result) = correlate(&bytes, format, &options)?;
                Ok((bytes, result, ingested))
            })
            .await?;
        let provenance = serde_json::to_string(&result.provenance)
            .map_err(|e| ServiceError::Internal(e.to_string()))?;
        let mut notes = ingested.notes.clone();
        notes.push(format!(
            "Estimated from {} initial states and {} shots; estimator: {provenance}",
            ingested.records.n_states(),
            result.shots_per_time.iter().sum::<u64>()
        ));
        notes.extend(result.warnings.iter().cloned());
        let meta = DatasetMeta {
            chain_length: u32::try_from(ingested.records.sites()).ok(),
            notes: "Correlations estimated from uploaded shot records.".into(),
            ..DatasetMeta::default()
        };
        let row = self
            .db(move |s| {
                let hash = content_hash(&result.map);
                let created_at = now_utc();
                let id = s.insert_dataset(&NewDataset {
                    session_id,
                    name: &name,
                    format: format_label,
                    content_hash: &hash,
                    created_at: &created_at,
                    meta: &meta,
                    notes: &notes,
                    map: &result.map,
                })?;
                s.insert_shot_file(session_id, id, &name, format_label, &bytes, &provenance)?;
                s.dataset(session_id, id)
            })
            .await?
            .ok_or_else(|| ServiceError::Internal("stored dataset vanished".into()))?;
        let summary = DatasetSummary::new(&row.0, &row.1);
        self.publish(session_id, "dataset-added", summary.id);
        Ok(summary)
    }
}
