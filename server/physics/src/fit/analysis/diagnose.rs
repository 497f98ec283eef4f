//! The analysis's warnings: exponent drift, poor fits, the chain's ends,
//! the crossover near α = 3/2, the sum rule, lattice effects and estimators
//! that disagree, each with advice.

use super::*;

/// What the diagnosis reads.
pub(super) struct DiagnosisInputs<'a> {
    pub(super) window: TimeWindow,
    /// The estimator lines of the verdict (standing, z with both errors).
    pub(super) lines: &'a [EstimatorLine],
    pub(super) local: &'a [LocalExponent],
    pub(super) autocorrelation: Option<&'a TailReport>,
    pub(super) collapse: Option<&'a CollapseReport>,
    pub(super) profile: Option<&'a ProfileSection>,
    pub(super) lattice_walk: Option<&'a LatticeWalkFitReport>,
    pub(super) sum_points: &'a [SumRulePoint],
    pub(super) chain: Option<Chain>,
}

pub(super) fn diagnose(
    map: &CorrelationMap,
    inputs: &DiagnosisInputs<'_>,
    warnings: &mut Vec<Warning>,
) {
    warnings.extend(diagnosis::exponent_drift(inputs.local, inputs.window));
    if let Some(tail) = inputs.autocorrelation {
        warnings.extend(poor_fit(
            "autocorrelation tail",
            tail.chi2_dof,
            tail.p_value,
            "C(0,t) is not one power law in the window: narrow it to where the local exponent \
             is flat.",
        ));
    }
    if let Some(profile) = inputs.profile {
        let p = &profile.preferred;
        warnings.extend(poor_fit(
            &format!("{} profile", p.model.name()),
            p.chi2_dof,
            p.p_value,
            "The scaling function does not describe the window: restrict it to late times and \
             the bulk, check the sum rule, and compare with the other profile model.",
        ));
        // The scale s(t) = (D t)^{1/μ} is smallest at the window's start.
        let t_min = p.t_window[0];
        let scale = (p.d * t_min).powf(1.0 / p.mu);
        warnings.extend(diagnosis::lattice_scale(p.mu, scale, t_min));
    }
    if let Some(walk) = inputs.lattice_walk {
        warnings.extend(poor_fit(
            "lattice-walk",
            walk.chi2_dof,
            walk.p_value,
            "The classical walk with power-law rates does not describe the data: the couplings \
             may not be a pure power law (use a measured coupling matrix), or early times carry \
             coherent dynamics; start the window later.",
        ));
    }
    if let Some(collapse) = inputs.collapse {
        warnings.extend(diagnosis::poor_collapse(
            collapse.chi2_dof,
            collapse.errors_known,
        ));
    }

    let edges = match inputs.chain {
        Some(c) => c.edges(),
        None => Edges::of_map(map),
    };
    warnings.extend(diagnosis::reaches_edges(map, inputs.window, edges));

    let crossover = match (inputs.lattice_walk, inputs.profile) {
        (Some(w), _) if !w.alpha_at_bound => {
            diagnosis::near_crossover(w.alpha, w.alpha_err, "the lattice-walk fit")
        }
        (_, Some(p))
            if p.preferred.model == ProfileModel::Stable
                && !p.preferred.mu_at_bound
                && p.preferred.mu >= 1.7 =>
        {
            diagnosis::near_crossover(
                (p.preferred.mu + 1.0) / 2.0,
                p.preferred.mu_err / 2.0,
                "the stable profile's index (α = (μ + 1)/2)",
            )
        }
        _ => None,
    };
    warnings.extend(crossover);

    let covers_chain = inputs.chain.map(|c| {
        let x = map.offsets();
        let edges = c.edges();
        x[0] <= edges.left && x[x.len() - 1] >= edges.right
    });
    warnings.extend(diagnosis::sum_rule_off(inputs.sum_points, covers_chain));

    // The same estimates and the same errors (stat ⊕ window) the verdict
    // compares, so the warning and the verdict's reasons never contradict.
    let estimates: Vec<ZEstimate> = inputs
        .lines
        .iter()
        .filter(|l| l.standing == Standing::Applies)
        .filter_map(|l| {
            l.z.as_ref().map(|z| ZEstimate {
                estimator: l.name,
                z: z.value,
                z_err: z.total_err(),
            })
        })
        .collect();
    warnings.extend(diagnosis::estimators_disagree(&estimates));
}
