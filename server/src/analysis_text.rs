//! The analysis report as plain text, for `analyze` and the text field of
//! the fits route's analysis: formatting only, every number comes from the
//! physics crate's report.

use std::fmt::Write as _;

use spreadscope_physics::fit::analysis::AnalysisReport;
use spreadscope_physics::fit::diagnosis::{WarningCode, plus_minus};
use spreadscope_physics::fit::verdict::Standing;

/// A readable table for the command line: the verdict, dataset, windows,
/// one line per estimator (z, D, quality), the profile preference, the
/// short-time check, the warnings with their advice, and the conventions.
#[must_use]
pub fn render(report: &AnalysisReport) -> String {
    let mut out = String::new();
    let v = &report.verdict;
    let _ = writeln!(out, "verdict   {}", v.headline);
    if !v.why.is_empty() {
        let _ = writeln!(out, "          chosen because {}", v.why);
    }
    for r in &v.reasons {
        let _ = writeln!(out, "          · {r}");
    }
    let _ = writeln!(out, "          {}", v.d_convention);
    let _ = writeln!(out);
    let d = &report.dataset;
    let _ = writeln!(
        out,
        "dataset   {} offsets (x = {}..{}), {} times (t = {}..{}), {} missing, errors {}",
        d.sites,
        d.offsets[0],
        d.offsets[1],
        d.times,
        num(d.t_range[0]),
        num(d.t_range[1]),
        d.missing,
        if d.errors_known { "given" } else { "not given" }
    );
    let _ = writeln!(
        out,
        "sum rule  Σ_x C(x,t) in the window: {:.4}..{:.4}",
        d.sum_rule.min, d.sum_rule.max
    );
    let w = &report.windows;
    let _ = writeln!(
        out,
        "window    t = {}..{}{}: {}",
        num(w.t_window[0]),
        num(w.t_window[1]),
        w.x_max.map_or(String::new(), |x| format!(", |x| ≤ {x}")),
        w.rule
    );
    if let (Some(n), Some(s), Some(b)) = (w.chain_sites, w.source, w.source_basis) {
        match w.source_average {
            Some(a) => {
                let symmetrised = if a.symmetrised { ", symmetrised" } else { "" };
                let _ = writeln!(
                    out,
                    "chain     {n} sites, mean over sources {}–{}{symmetrised} ({b})",
                    a.first, a.last
                );
            }
            None => {
                let _ = writeln!(out, "chain     {n} sites, source {s} ({b})");
            }
        }
    }
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "bootstrap {} resamples (seed {}); window error over {} neighbouring windows ({})",
        report.bootstrap,
        report.seed,
        w.family.len(),
        w.family
            .iter()
            .map(|m| m.change)
            .collect::<Vec<_>>()
            .join(", ")
    );
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "{:<22} {:<48} {:<40} standing",
        "estimator", "z", "D (sites^z per time unit)"
    );
    let _ = writeln!(out, "{}", "-".repeat(124));
    for l in &report.estimators {
        let (z, d) = if l.standing == Standing::Applies {
            (
                l.z.map_or_else(|| "—".to_string(), |m| m.text()),
                l.d.map_or_else(String::new, |m| m.text()),
            )
        } else {
            (standing_words(l.standing).to_string(), String::new())
        };
        let _ = writeln!(out, "{:<22} {z:<48} {d:<40} {}", l.name, l.detail);
    }
    if let Some(l) = &report.lattice_walk {
        let _ = writeln!(
            out,
            "{:<22} α = {}, γ0 = {}",
            "walk parameters",
            plus_minus(l.alpha, l.alpha_err),
            plus_minus(l.gamma0, l.gamma0_err)
        );
    }
    let _ = writeln!(out);
    if let Some(p) = &report.profile {
        match &p.comparison {
            Some(c) => {
                let _ = writeln!(
                    out,
                    "profile   preferred: {} (ΔAIC = {}, ΔBIC = {}): {}",
                    c.preferred.name(),
                    num(c.delta_aic),
                    num(c.delta_bic),
                    c.reason
                );
            }
            None => {
                let _ = writeln!(out, "profile   Gaussian only (no model comparison)");
            }
        }
        if let (Some(de), mu) = (p.preferred.d_err_bootstrap, p.preferred.mu_err_bootstrap) {
            let _ = writeln!(
                out,
                "          bootstrap ({} resamples, seed {}): D ± {}{}",
                report.bootstrap,
                report.seed,
                num(de),
                mu.map_or(String::new(), |m| format!(", μ ± {}", num(m)))
            );
        }
    }
    if let Some(s) = &report.short_time {
        let _ = writeln!(
            out,
            "short t   Σ_b K_0b² = {}, K_01² = {} (t ≤ {}, order t^{})",
            plus_minus(s.square_sum.value, s.square_sum.err),
            s.neighbour
                .map_or("—".to_string(), |k| plus_minus(k.value, k.err)),
            num(s.t_window[1]),
            s.order
        );
    }
    let _ = writeln!(out);
    if report.warnings.is_empty() {
        let _ = writeln!(out, "warnings  none");
    } else {
        let _ = writeln!(out, "warnings");
        for w in &report.warnings {
            let _ = writeln!(out, "  [{}] {}", code_name(w.code), w.message);
            let _ = writeln!(out, "      → {}", w.advice);
        }
    }
    for n in &report.notes {
        let _ = writeln!(out, "note      {n}");
    }
    let _ = writeln!(out, "\nconventions: {}", report.conventions);
    out
}

fn standing_words(s: Standing) -> &'static str {
    match s {
        Standing::Applies => "applies",
        Standing::NotApplicable => "does not apply",
        Standing::Saturated => "saturated regime",
        Standing::AtBound => "at a bound",
        Standing::PoorFit => "poor fit",
        Standing::Failed => "failed",
    }
}

fn code_name(code: WarningCode) -> &'static str {
    match code {
        WarningCode::ExponentDrift => "exponent_drift",
        WarningCode::PoorFit => "poor_fit",
        WarningCode::ReachesEdges => "reaches_edges",
        WarningCode::NearCrossover => "near_crossover",
        WarningCode::SumRuleOff => "sum_rule_off",
        WarningCode::EstimatorsDisagree => "estimators_disagree",
        WarningCode::EstimatorFailed => "estimator_failed",
        WarningCode::LatticeScale => "lattice_scale",
    }
}

/// A number with four significant digits (scientific beyond 1e±4).
fn num(v: f64) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e4).contains(&a) {
        format!("{v:.3e}")
    } else {
        let digits = if a == 0.0 {
            3
        } else {
            (3 - a.log10().floor() as i32).clamp(0, 6) as usize
        };
        format!("{v:.digits$}")
    }
}

#[cfg(test)]
mod tests {
    use super::num;

    #[test]
    fn numbers_keep_four_significant_digits() {
        assert_eq!(num(0.5), "0.5000");
        assert_eq!(num(12346.0), "1.235e4");
        assert_eq!(num(-0.000_12), "-1.200e-4");
    }
}
