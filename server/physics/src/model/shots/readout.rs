//! Readout correction: the plan of a run (none, given probabilities, or
//! calibrated from the t = 0 shots in every replicate), the calibration and
//! the contrast b = 1 − p01 − p10 the estimator divides out (module
//! documentation of `shots`, "Readout correction").

use super::*;

/// The readout correction as it will be applied in every replicate.
#[derive(Debug, Clone)]
pub(super) enum Plan {
    None,
    Fixed { p01: Vec<f64>, p10: Vec<f64> },
    TimeZero { per_site: bool },
}

/// Readout probabilities from the t = 0 cells under `weights`: per site, or
/// pooled. `Err` names what is missing.
pub(super) fn calibrate(
    records: &ShotRecords,
    t0: usize,
    per_site: bool,
    weights: &[u32],
) -> Result<(Vec<f64>, Vec<f64>), String> {
    let n = records.sites;
    // Weighted shot counts with bit up / down, and the misreadings of each.
    let (mut up, mut down) = (vec![0u64; n], vec![0u64; n]);
    let (mut read0, mut read1) = (vec![0u64; n], vec![0u64; n]);
    for cell in &records.cells[t0] {
        let w = u64::from(weights[cell.state as usize]);
        if w == 0 {
            continue;
        }
        let shots = w * u64::from(cell.shots);
        for i in 0..n {
            let ups = w * u64::from(records.ups[cell.offset + i]);
            if records.bit(cell.state, i) == 1 {
                up[i] += shots;
                read0[i] += shots - ups;
            } else {
                down[i] += shots;
                read1[i] += ups;
            }
        }
    }
    let ratio = |a: u64, b: u64| a as f64 / b as f64;
    if per_site {
        let mut p01 = vec![0.0; n];
        let mut p10 = vec![0.0; n];
        for i in 0..n {
            if up[i] == 0 || down[i] == 0 {
                let which = if up[i] == 0 { "up" } else { "down" };
                return Err(format!(
                    "site {i} is never prepared {which} among the t = 0 shots, so its \
                     readout errors cannot be calibrated (use a global calibration)"
                ));
            }
            p01[i] = ratio(read0[i], up[i]);
            p10[i] = ratio(read1[i], down[i]);
        }
        Ok((p01, p10))
    } else {
        let (u, d): (u64, u64) = (up.iter().sum(), down.iter().sum());
        if u == 0 || d == 0 {
            return Err("the t = 0 shots never prepare both bit values".into());
        }
        let p01 = ratio(read0.iter().sum(), u);
        let p10 = ratio(read1.iter().sum(), d);
        Ok((vec![p01; n], vec![p10; n]))
    }
}

/// The factor b = 1 − p01 − p10 by which a readout error of the final
/// measurement scales the connected C (module documentation, "Readout
/// correction"). The one rule used wherever a readout error is inferred.
#[must_use]
pub fn readout_contrast(p01: f64, p10: f64) -> f64 {
    1.0 - p01 - p10
}

/// The symmetric readout error e (p01 = p10 = e) that scales C by the factor
/// `contrast`: the inverse of [`readout_contrast`], e = (1 − b)/2.
#[must_use]
pub fn symmetric_readout_error(contrast: f64) -> f64 {
    (1.0 - contrast) / 2.0
}

pub(super) fn contrast(p01: &[f64], p10: &[f64]) -> Vec<f64> {
    p01.iter()
        .zip(p10)
        .map(|(&a, &b)| readout_contrast(a, b))
        .collect()
}

pub(super) fn check_probability(p: f64, what: &str) -> Result<(), ShotError> {
    if (0.0..1.0).contains(&p) {
        Ok(())
    } else {
        Err(ShotError::Readout(format!(
            "{what} = {p} is not a probability in [0, 1)"
        )))
    }
}

pub(super) fn plan_for(readout: &Readout, records: &ShotRecords) -> Result<Plan, ShotError> {
    let n = records.sites;
    Ok(match readout {
        Readout::None => Plan::None,
        Readout::Global { p01, p10 } => {
            check_probability(*p01, "p(0|1)")?;
            check_probability(*p10, "p(1|0)")?;
            Plan::Fixed {
                p01: vec![*p01; n],
                p10: vec![*p10; n],
            }
        }
        Readout::PerSite { p01, p10 } => {
            for (what, v) in [("p(0|1)", p01), ("p(1|0)", p10)] {
                if v.len() != n {
                    return Err(ShotError::Readout(format!(
                        "{} values of {what} given for a chain of {n} sites",
                        v.len()
                    )));
                }
                for (i, &p) in v.iter().enumerate() {
                    check_probability(p, &format!("{what} of site {i}"))?;
                }
            }
            Plan::Fixed {
                p01: p01.clone(),
                p10: p10.clone(),
            }
        }
        Readout::FromTimeZero { per_site } => {
            if records.times.first().is_none_or(|&t| t > 0.0) {
                return Err(ShotError::NoTimeZero);
            }
            Plan::TimeZero {
                per_site: *per_site,
            }
        }
    })
}
