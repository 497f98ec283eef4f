//! The fitted curves drawn over the data: the tail law, and the profile or
//! lattice-walk model with its residual on the fit's grid.

use super::*;

/// The fitted curves of a result, on the grid of its window.
pub(super) fn overlay(
    input: &FitInput,
    parameters: &BTreeMap<String, Parameter>,
    report: &FitReport,
) -> Option<Overlay> {
    let value = |name: &str| parameters.get(name).map(|p| p.value);
    let map = &input.map;
    match report {
        FitReport::Tail(tail) => {
            let (a, z) = (value("amplitude")?, value("z")?);
            let [t0, t1] = tail.report.t_window;
            let n = 40;
            let t: Vec<f64> = (0..n)
                .map(|i| t0 * (t1 / t0).powf(i as f64 / (n - 1) as f64))
                .collect();
            let c: Vec<f64> = t.iter().map(|&t| a * t.powf(-1.0 / z)).collect();
            Some(Overlay {
                tail: Some(TailCurve { t, c }),
                ..Overlay::default()
            })
        }
        FitReport::Profile(_) | FitReport::ProfileComparison(_) | FitReport::Analysis(_) => {
            let (d, mu) = (value("D")?, value("mu")?);
            let model = map.times().iter().map(|&t| {
                let density = StableDensity::new(mu, (d * t).powf(1.0 / mu)).ok()?;
                Some(
                    map.offsets()
                        .iter()
                        .map(|&x| density.pdf(f64::from(x)))
                        .collect::<Vec<_>>(),
                )
            });
            let model: Option<Vec<Vec<f64>>> = model.collect();
            Some(grid_overlay(map, model?))
        }
        FitReport::LatticeWalk(walk_fit) => {
            let (gamma0, alpha) = (value("gamma0")?, value("alpha")?);
            let walk = LatticeWalk::power_law(walk_fit.sites, gamma0, alpha).ok()?;
            // The model is formed as the fit formed it: from the one source,
            // or averaged over the window of sources (and symmetrised).
            let average = walk_fit
                .average
                .unwrap_or(SourceAverage::single(walk_fit.source));
            let from: Vec<ndarray::Array2<f64>> = (average.first..=average.last)
                .map(|j| walk.propagate(j, map.times()).ok())
                .collect::<Option<_>>()?;
            let model: Option<Vec<Vec<f64>>> = (0..map.n_times())
                .map(|ti| {
                    map.offsets()
                        .iter()
                        .map(|&x| {
                            let terms = average.terms(walk_fit.sites, x);
                            (!terms.is_empty()).then(|| {
                                terms
                                    .iter()
                                    .map(|&(i, j, w)| w * from[j - average.first][(ti, i)])
                                    .sum()
                            })
                        })
                        .collect()
                })
                .collect();
            Some(grid_overlay(map, model?))
        }
        FitReport::Width(_) | FitReport::Collapse(_) | FitReport::ShortTime(_) => None,
    }
}

/// `profile` and `residual` overlays from model values on the map's grid.
fn grid_overlay(map: &CorrelationMap, model: Vec<Vec<f64>>) -> Overlay {
    let residual: Vec<Vec<Option<f64>>> = (0..map.n_times())
        .map(|ti| {
            (0..map.n_sites())
                .map(|xi| map.get(ti, xi).map(|(c, _)| c - model[ti][xi]))
                .collect()
        })
        .collect();
    let err = map.errors().map(|_| {
        (0..map.n_times())
            .map(|ti| {
                (0..map.n_sites())
                    .map(|xi| map.get(ti, xi).and_then(|(_, e)| e))
                    .collect::<Vec<_>>()
            })
            .collect::<Vec<_>>()
    });
    Overlay {
        tail: None,
        profile: Some(GridCurve {
            x: map.offsets().to_vec(),
            t: map.times().to_vec(),
            c: model,
        }),
        residual: Some(ResidualGrid {
            x: map.offsets().to_vec(),
            t: map.times().to_vec(),
            values: residual,
            err,
        }),
    }
}
