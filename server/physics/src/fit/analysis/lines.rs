//! One line per estimator for the verdict: its z and D with the statistical
//! and window errors, or why it does not apply (not applicable, saturated,
//! at a bound, poor fit, failed).

use super::*;

/// What the estimator lines are built from.
pub(super) struct LineInputs<'a> {
    pub(super) map: &'a CorrelationMap,
    pub(super) choice: &'a WindowChoice,
    pub(super) chain: Option<Chain>,
    pub(super) autocorrelation: Option<&'a AutocorrelationSection>,
    pub(super) width: Option<&'a WidthReport>,
    pub(super) collapse: Option<&'a CollapseSection>,
    pub(super) profile: Option<&'a ProfileSection>,
    pub(super) lattice_walk: Option<&'a LatticeWalkFitReport>,
    pub(super) moment: &'a Result<SecondMomentFit, String>,
    pub(super) family: &'a [Quick],
    pub(super) walk_family: &'a [f64],
    pub(super) evidence: Evidence,
}

/// The lattice-walk fit's options for the chain: its source, or its
/// window of sources.
pub(super) fn walk_options(chain: Chain) -> LatticeWalkFitOptions {
    match chain.average {
        Some(a) => LatticeWalkFitOptions::averaged(chain.sites, a),
        None => LatticeWalkFitOptions::new(chain.sites, chain.source),
    }
}

pub(super) fn with_sys(mut m: Measured, values: &[f64]) -> Measured {
    m.err_sys = windows::window_error(m.value, values);
    m
}

pub(super) fn failed(name: &'static str, detail: &str) -> EstimatorLine {
    EstimatorLine {
        name,
        z: None,
        d: None,
        standing: Standing::Failed,
        detail: detail.to_string(),
    }
}

/// The standing of an asymptotic estimator's fit: saturated when the rule
/// found no asymptotic regime, a poor fit above [`POOR_FIT_ABOVE`].
pub(super) fn asymptotic_standing(choice: &WindowChoice, chi2_dof: f64) -> (Standing, String) {
    if !choice.asymptotic {
        (Standing::Saturated, choice.rule.clone())
    } else if chi2_dof > POOR_FIT_ABOVE {
        (
            Standing::PoorFit,
            format!("χ²/dof = {chi2_dof:.3}, errors scaled by √(χ²/dof)"),
        )
    } else {
        (Standing::Applies, format!("χ²/dof = {chi2_dof:.3}"))
    }
}

/// Weight outside the window's offsets at its last time, 1 − Σ C, minus
/// three standard errors; `None` when the chain (or map) is not known to
/// carry the whole weight.
pub(super) fn weight_outside(map: &CorrelationMap, choice: &WindowChoice) -> Option<(f64, f64)> {
    let m = map
        .window(Some(choice.t_min), Some(choice.t_max), choice.x_max)
        .ok()?;
    let p = m.sum_rule().last().copied()?;
    Some(((1.0 - p.sum) - 3.0 * p.err.unwrap_or(0.0), p.t))
}

pub(super) fn lines(inputs: &LineInputs<'_>) -> Vec<EstimatorLine> {
    let choice = inputs.choice;
    let fam =
        |f: fn(&Quick) -> Option<f64>| -> Vec<f64> { inputs.family.iter().filter_map(f).collect() };
    let outside = weight_outside(inputs.map, choice).filter(|(w, _)| *w > SUM_RULE_TOLERANCE);
    let mut out = Vec::new();

    // Second moment: applies with a front and the whole weight inside.
    out.push(match inputs.moment {
        Ok(f) => {
            let z = with_sys(
                Measured::new(f.z, f.z_err, Some(f.chi2_dof)),
                &fam(|q| q.second_moment),
            );
            let (standing, detail) = if !inputs.evidence.front {
                (
                    Standing::NotApplicable,
                    "no sharp front: the moment of a heavy-tailed profile is set by the window's edge"
                        .to_string(),
                )
            } else if let Some((w, t)) = outside {
                (
                    Standing::NotApplicable,
                    format!("{:.1} % of the weight lies outside the window at t = {t:.4}", 100.0 * w),
                )
            } else {
                asymptotic_standing(choice, f.chi2_dof)
            };
            EstimatorLine {
                name: "second moment",
                z: Some(z),
                d: None,
                standing,
                detail,
            }
        }
        Err(e) => failed("second moment", e),
    });

    // Lattice walk.
    if let Some(w) = inputs.lattice_walk {
        let z = with_sys(
            Measured::new(w.z, w.z_err, Some(w.chi2_dof)),
            inputs.walk_family,
        );
        let (standing, detail) = if w.alpha_at_bound {
            (
                Standing::AtBound,
                format!("α = {:.4} on the edge of its allowed range", w.alpha),
            )
        } else if w.chi2_dof > POOR_FIT_ABOVE {
            (
                Standing::PoorFit,
                format!("χ²/dof = {:.3}, errors scaled by √(χ²/dof)", w.chi2_dof),
            )
        } else {
            (
                Standing::Applies,
                format!(
                    "α = {}, χ²/dof = {:.3}",
                    diagnosis::plus_minus(w.alpha, w.alpha_err),
                    w.chi2_dof
                ),
            )
        };
        out.push(EstimatorLine {
            name: "lattice-walk fit",
            z: Some(z),
            d: walk_d(w),
            standing,
            detail,
        });
    } else if let Some(c) = inputs.chain {
        out.push(EstimatorLine {
            name: "lattice-walk fit",
            z: None,
            d: None,
            standing: Standing::NotApplicable,
            detail: format!(
                "not run: the {} sites were inferred from the map and the window never reached \
                 the chain's ends or saturation",
                c.sites
            ),
        });
    }

    // Collapse: z and D from the master-curve fit; its errors already
    // carry the √(χ²/dof) scaling of a poor fit.
    match inputs.collapse {
        Some(c) => {
            let f = &c.fit;
            let mut z = with_sys(Measured::new(f.z, f.z_err, None), &fam(|q| q.collapse));
            z.interval = Some(f.z_interval);
            z.bias = f.z_bias;
            z.err_scale = f.err_scale;
            let d = f.d.is_finite().then(|| {
                let mut d = with_sys(Measured::new(f.d, f.d_err, None), &fam(|q| q.collapse_d));
                d.interval = f.d_err.is_finite().then_some(f.d_interval);
                d.bias = f.d_bias;
                d.err_scale = f.err_scale;
                d
            });
            let (standing, detail) = if f.termination == Termination::MinimumAtBoundary {
                (
                    Standing::AtBound,
                    format!("z = {:.4} at the edge of the searched range", f.z),
                )
            } else if !choice.asymptotic {
                (Standing::Saturated, choice.rule.clone())
            } else if f.errors_known && f.chi2_dof > POOR_FIT_ABOVE {
                (
                    Standing::PoorFit,
                    format!(
                        "the curves do not fall on one master curve: χ²/dof = {:.3}, \
                         errors scaled by √(χ²/dof)",
                        f.chi2_dof
                    ),
                )
            } else {
                (
                    Standing::Applies,
                    format!(
                        "master-curve χ²/dof = {:.3}, S = {:.3}, error: {}",
                        f.chi2_dof, c.quality, f.z_err_source
                    ),
                )
            };
            out.push(EstimatorLine {
                name: "scaling collapse",
                z: Some(z),
                d,
                standing,
                detail,
            });
        }
        None => out.push(failed("scaling collapse", "the collapse did not run")),
    }

    // Profiles: stable and Gaussian.
    if let Some(p) = inputs.profile {
        let reports: Vec<&ProfileReport> = match &p.comparison {
            Some(c) => vec![&c.stable, &c.gaussian],
            None => vec![&p.preferred],
        };
        for r in reports {
            let stable = r.model == ProfileModel::Stable;
            let d_err = r.d_err_bootstrap.unwrap_or(r.d_err);
            let mut d = Measured::new(r.d, d_err, Some(r.chi2_dof));
            if let Some(b) = &r.bootstrap {
                d.interval = Some([b.d.lower, b.d.upper]);
                d.bias = Some(b.d.mean - r.d);
            }
            let (name, z, d) = if stable {
                let mu_err = r.mu_err_bootstrap.unwrap_or(r.mu_err);
                let mut z = with_sys(
                    Measured::new(r.mu, mu_err, Some(r.chi2_dof)),
                    &fam(|q| q.stable.map(|s| s.0)),
                );
                if let Some(b) = r.bootstrap.as_ref().and_then(|b| b.mu.as_ref()) {
                    z.interval = Some([b.lower, b.upper]);
                    z.bias = Some(b.mean - r.mu);
                }
                (
                    "stable profile",
                    z,
                    with_sys(d, &fam(|q| q.stable.map(|s| s.1))),
                )
            } else {
                let z = Measured {
                    err_sys: Some(0.0),
                    ..Measured::new(2.0, 0.0, None)
                };
                ("Gaussian profile", z, with_sys(d, &fam(|q| q.gaussian_d)))
            };
            let preferred = p.preferred.model == r.model;
            let (standing, detail) = if stable && r.mu_at_bound {
                (
                    Standing::AtBound,
                    format!("μ = {:.4} on the edge of its allowed range", r.mu),
                )
            } else if !preferred {
                (
                    Standing::NotApplicable,
                    "the other profile model is preferred (information criteria)".to_string(),
                )
            } else {
                asymptotic_standing(choice, r.chi2_dof)
            };
            out.push(EstimatorLine {
                name,
                z: Some(z),
                d: Some(d),
                standing,
                detail,
            });
        }
    } else {
        out.push(failed("stable profile", "the profile fit did not run"));
    }

    // Tail.
    match inputs.autocorrelation {
        Some(a) => {
            let z = with_sys(
                Measured::new(a.fit.z, a.fit.z_err, Some(a.fit.chi2_dof)),
                &fam(|q| q.tail),
            );
            let (standing, detail) = if inputs.evidence.oscillating {
                (
                    Standing::NotApplicable,
                    "C(0,t) oscillates: no single power law".to_string(),
                )
            } else {
                asymptotic_standing(choice, a.fit.chi2_dof)
            };
            out.push(EstimatorLine {
                name: "autocorrelation tail",
                z: Some(z),
                d: None,
                standing,
                detail,
            });
        }
        None => out.push(failed(
            "autocorrelation tail",
            "no usable C(0,t) in the window",
        )),
    }

    // Width: does not apply when weight leaves the window.
    match inputs.width {
        Some(w) => {
            let z = with_sys(
                Measured::new(w.z, w.z_err, Some(w.chi2_dof)),
                &fam(|q| q.width),
            );
            let (standing, detail) = if let Some((f, t)) = outside {
                (
                    Standing::NotApplicable,
                    format!(
                        "{:.1} % of the weight lies outside the window at t = {t:.4}, so the \
                         quantile is taken of a cut profile",
                        100.0 * f
                    ),
                )
            } else if w.times_beyond_coverage > 0 {
                (
                    Standing::NotApplicable,
                    format!(
                        "{} times have a width beyond the map's coverage",
                        w.times_beyond_coverage
                    ),
                )
            } else {
                asymptotic_standing(choice, w.chi2_dof)
            };
            out.push(EstimatorLine {
                name: "quantile width",
                z: Some(z),
                d: None,
                standing,
                detail,
            });
        }
        None => out.push(failed("quantile width", "not computed")),
    }
    out
}
