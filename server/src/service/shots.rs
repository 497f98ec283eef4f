//! Shot records in a session: an uploaded shot file is kept as it came
//! (so the estimator can be re-run with other options) and its correlation
//! map becomes a dataset whose notes carry the estimator's provenance.
//! Also the option spellings shared by the API and `spreadscope correlate`.

use serde::Deserialize;
use serde_json::{Value, json};
use spreadscope_physics::fit::couplings_fit::{CouplingsFitOptions, fit_power_law};
use spreadscope_physics::model::shots::{
    EstimateOptions, EstimateProvenance, Readout, ShotEstimate, SourceWindow, estimate,
};

use super::{Access, DatasetSummary, Service, ServiceError, ServiceResult, StoredDataset};
use crate::dataset::DatasetMeta;
use crate::ingest::couplings::{CouplingConvention, CouplingsImportOptions, parse_couplings};
use crate::ingest::shots::{ShotFormat, ShotsIngested};

/// Estimator options as people type them (query string or command line).
#[derive(Debug, Clone, Default, Deserialize, serde::Serialize)]
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
                // `p01,p10` for every site, or one `p01,p10` pair per site
                // separated by `;` (site 0 first).
                let pairs = text
                    .split(';')
                    .map(|pair| parse_readout_pair(text, pair))
                    .collect::<Result<Vec<_>, _>>()?;
                match pairs.as_slice() {
                    [(p01, p10)] => Readout::Global {
                        p01: *p01,
                        p10: *p10,
                    },
                    _ => Readout::PerSite {
                        p01: pairs.iter().map(|p| p.0).collect(),
                        p10: pairs.iter().map(|p| p.1).collect(),
                    },
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

/// One `p01,p10` pair of readout confusion probabilities, each in [0, 1/2).
fn parse_readout_pair(text: &str, pair: &str) -> Result<(f64, f64), String> {
    let (a, b) = pair.split_once(',').ok_or_else(|| {
        format!("`readout` `{text}`: expected p01,p10 (or one pair per site, separated by `;`)")
    })?;
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
    Ok((parse(a)?, parse(b)?))
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

/// The shot format of a stored dataset's format label.
/// The metadata that says how a map estimated from shots was formed: its
/// chain length and its source, or its window of sources, and whether it
/// was symmetrised (the lattice-walk fit forms its model the same way).
#[must_use]
pub fn estimate_meta(sites: usize, provenance: &EstimateProvenance) -> DatasetMeta {
    let (first, last) = provenance.sources;
    let site = |j: usize| u32::try_from(j).ok();
    DatasetMeta {
        chain_length: site(sites),
        source_site: if first == last { site(first) } else { None },
        source_window: if first == last {
            None
        } else {
            site(first).zip(site(last)).map(|(a, b)| [a, b])
        },
        symmetrised: provenance.options.symmetrise,
        ..DatasetMeta::default()
    }
}

fn stored_format(label: &str) -> ShotFormat {
    match label {
        "shots-npz" => ShotFormat::Npz,
        "shots-h5" => ShotFormat::Hdf5,
        _ => ShotFormat::Csv,
    }
}

impl Service {
    /// The site-resolved correlations C_{i,source}(t) of a dataset made from
    /// shots, re-estimated from the kept shot file with its upload options.
    ///
    /// # Errors
    /// NotFound when the dataset has no shots; BadRequest for a bad source.
    pub async fn shot_pairs(
        &self,
        access: &Access,
        dataset: i64,
        source: Option<usize>,
    ) -> ServiceResult<Value> {
        let session_id = access.session.id;
        let (format, bytes, options) = self
            .db(move |s| s.shot_file(session_id, dataset))
            .await?
            .ok_or(ServiceError::NotFound)?;
        let format = stored_format(&format);
        let options: ShotOptions = serde_json::from_str(&options)
            .map_err(|e| ServiceError::Internal(format!("stored shot options: {e}")))?;
        self.heavy(move || {
            let (ingested, result) = correlate(&bytes, format, &options)?;
            let sites = ingested.records.sites();
            // Default to the source the dataset was estimated for.
            let source = source
                .or(options.source)
                .unwrap_or(sites.saturating_sub(1) / 2);
            if source >= sites {
                return Err(ServiceError::BadRequest(format!(
                    "parameter `source`: {source} is outside a chain of {sites} sites"
                )));
            }
            let pick = |a: &ndarray::Array3<f64>| -> Vec<Vec<f64>> {
                (0..a.dim().0)
                    .map(|ti| (0..sites).map(|i| a[(ti, i, source)]).collect())
                    .collect()
            };
            Ok(json!({
                "sites": sites,
                "source": source,
                "times": result.pairs.times,
                "C": pick(&result.pairs.values),
                "err": pick(&result.pairs.errors),
                "sum_rule": result.sum_rule,
                "states_per_time": result.states_per_time,
                "shots_per_time": result.shots_per_time,
                "warnings": result.warnings,
                "options": options,
            }))
        })
        .await
    }

    /// Re-runs the estimator on a dataset's kept shot file with other
    /// options; the result is a new dataset (the old one is untouched).
    ///
    /// # Errors
    /// Forbidden for view links; NotFound when the dataset has no shots;
    /// BadRequest naming the option.
    pub async fn reestimate(
        &self,
        access: &Access,
        dataset: i64,
        name: &str,
        options: ShotOptions,
    ) -> ServiceResult<DatasetSummary> {
        access.require_edit()?;
        let session_id = access.session.id;
        let (format, bytes, _) = self
            .db(move |s| s.shot_file(session_id, dataset))
            .await?
            .ok_or(ServiceError::NotFound)?;
        let format = stored_format(&format);
        self.add_shots(access, name, format, bytes, options).await
    }

    /// A measured coupling matrix (CSV) and its effective power law
    /// J/|i−j|^α with errors. Stores nothing.
    ///
    /// # Errors
    /// Invalid with every problem of the file; BadRequest when the fit is
    /// impossible.
    pub async fn couplings(
        &self,
        bytes: Vec<u8>,
        convention: CouplingConvention,
    ) -> ServiceResult<Value> {
        self.heavy(move || {
            let read = parse_couplings(
                std::io::Cursor::new(bytes),
                &CouplingsImportOptions {
                    convention,
                    ..CouplingsImportOptions::default()
                },
            )
            .map_err(ServiceError::Invalid)?;
            let fit = fit_power_law(&read.couplings, None, &CouplingsFitOptions::default())
                .map_err(|e| ServiceError::BadRequest(format!("power-law fit: {e}")))?;
            let m = read.couplings.matrix();
            let matrix: Vec<Vec<f64>> = m.outer_iter().map(|r| r.to_vec()).collect();
            let mut fit_value =
                serde_json::to_value(&fit).map_err(|e| ServiceError::Internal(e.to_string()))?;
            fit_value["J"] = json!(fit.strength);
            fit_value["J_err"] = json!(fit.strength_err);
            Ok(json!({
                "sites": read.couplings.sites(),
                "matrix": matrix,
                "fit": fit_value,
                "notes": read.notes,
            }))
        })
        .await
    }

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
        let stored_options =
            serde_json::to_string(&options).map_err(|e| ServiceError::Internal(e.to_string()))?;
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
            notes: "Correlations estimated from uploaded shot records.".into(),
            ..estimate_meta(ingested.records.sites(), &result.provenance)
        };
        self.store_dataset(StoredDataset {
            session_id,
            name,
            format: format_label,
            meta,
            notes,
            map: result.map,
            shots: Some((bytes, stored_options)),
        })
        .await
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn readout_options_are_global_or_per_site() {
        let global = ShotOptions {
            readout: Some("0.02,0.05".into()),
            ..ShotOptions::default()
        };
        assert!(matches!(
            global.to_estimate_options().expect("valid").readout,
            Readout::Global { .. }
        ));
        let per_site = ShotOptions {
            readout: Some("0.01,0.02; 0.03,0.04; 0,0".into()),
            ..ShotOptions::default()
        };
        match per_site.to_estimate_options().expect("valid").readout {
            Readout::PerSite { p01, p10 } => {
                assert_eq!(p01.len(), 3);
                assert!((p10[1] - 0.04).abs() < 1e-15);
            }
            other => panic!("{other:?}"),
        }
        for bad in ["0.6,0.1", "0.1", "0.1,0.1;x,0"] {
            let options = ShotOptions {
                readout: Some(bad.into()),
                ..ShotOptions::default()
            };
            assert!(
                options
                    .to_estimate_options()
                    .unwrap_err()
                    .contains("readout"),
                "{bad}"
            );
        }
    }
}
