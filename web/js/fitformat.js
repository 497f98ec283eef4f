// Words and numbers for fit results, shared by the fit panel, the session
// log and the cross-run table: names of estimators and parameters, values
// with their errors rounded together, quality figures, why a fit stopped.
// Display only: knows nothing about the API's transport, the page or
// plotting.

import { formatNumber } from "./format.js";

/** @typedef {import("./api.js").FitResult} FitResult */
/** @typedef {import("./api.js").FitParameter} FitParameter */

/**
 * Estimators: a short name and what each does, in a sentence.
 * @type {Record<import("./api.js").FitMethod, [string, string]>}
 */
export const METHOD_TEXT = {
  tail: ["Autocorrelation tail", "Power law C(0,t) ∝ t^(−1/z) fitted inside the time window."],
  width: ["Width growth", "A quantile half-width of the profile growing as t^(1/z)."],
  collapse: ["Automatic collapse", "The z at which the rescaled slices fall onto one curve best (lowest S)."],
  profile: ["Scaling-function shape", "Gaussian against stable profile of index μ, with D; says which fits better."],
  lattice_walk: ["Lattice-walk fit", "Hop rate γ0 and range α of a classical walk on the finite chain."],
  short_time: ["Early-time coupling check", "The short-time expansion against the first times: checks the couplings."],
  analysis: ["Everything at once", "Every estimator above in one report."],
};

/**
 * @param {string} method
 * @returns {string}
 */
export function methodName(method) {
  const known = /** @type {Record<string, [string, string] | undefined>} */ (METHOD_TEXT)[method];
  return known ? known[0] : method.replace(/_/g, " ");
}

/**
 * Parameter names with their meaning and unit.
 * @type {Record<string, [string, string] | undefined>}
 */
const PARAMETER_TEXT = {
  z: ["z", "dynamical exponent"],
  D: ["D", "transport coefficient, sites^z per time unit"],
  mu: ["μ", "index of the stable profile"],
  amplitude: ["A", "amplitude of the power law"],
  gamma0: ["γ0", "hop rate of the lattice walk"],
  alpha: ["α", "range exponent of the couplings"],
  K2_sum: ["ΣK₂", "second-order coupling sum of the short-time expansion"],
  K01_sq: ["K₀₁²", "squared coupling from the source to its neighbour"],
};

/**
 * @param {string} name
 * @returns {[string, string]} symbol and meaning
 */
export function parameterText(name) {
  return PARAMETER_TEXT[name] ?? [name, ""];
}

/**
 * A value with its error, both rounded to the error's second significant
 * digit: 1.50234 ± 0.0413 → "1.502 ± 0.041".
 * @param {number} value
 * @param {number | null | undefined} err
 * @returns {string}
 */
export function withError(value, err) {
  if (!Number.isFinite(value)) return String(value);
  if (err === null || err === undefined || !Number.isFinite(err) || err <= 0) return formatNumber(value);
  const digits = 1 - Math.floor(Math.log10(err));
  // A line may break before "±", never after it.
  if (digits < 0 || digits > 8 || Math.abs(value) >= 1e5 || Math.abs(value) < 1e-3) {
    return `${formatNumber(value)} ±\u00a0${formatNumber(Number(err.toPrecision(2)))}`;
  }
  return `${value.toFixed(digits)} ±\u00a0${err.toFixed(digits)}`;
}

/**
 * The unit of D for a dataset: sites^z per time unit, with the dataset's
 * unit when it is set.
 * @param {import("./api.js").DatasetDetail} d
 * @returns {string}
 */
export function dUnit(d) {
  const unit = d.meta.time_unit ? d.meta.time_unit.trim() : "";
  if (unit === "") return "sites^z per time unit";
  const needsBrackets = /[\s/*·]/.test(unit);
  return `sites^z / ${needsBrackets ? `(${unit})` : unit}`;
}

/**
 * A parameter of a fit for the banner: fixed ones say so, others carry the
 * statistical error and, when the server sends one, the window systematic.
 * @param {import("./api.js").FitParameter} p
 * @returns {string}
 */
export function parameterValue(p) {
  const extra = /** @type {{fixed?: boolean, err_sys?: number | null}} */ (p);
  if (extra.fixed) return `${withError(p.value, null)} (fixed)`;
  return withTwoErrors(p.value, p.err ?? p.err_bootstrap ?? null, extra.err_sys ?? null);
}

/**
 * A value with its statistical and window errors, rounded to the
 * statistical one (two significant digits): "1.304 ± 0.0005 (stat) ±
 * 0.0040 (window)". Without a window error it is `withError`'s text.
 * @param {number} value
 * @param {number | null} stat
 * @param {number | null} sys
 * @returns {string}
 */
export function withTwoErrors(value, stat, sys) {
  const text = withError(value, stat);
  if (stat !== null && Number.isFinite(stat) && stat > 0 && sys !== null && Number.isFinite(sys) && sys > 0) {
    const digits = Math.max(0, 1 - Math.floor(Math.log10(stat)));
    return `${text} (stat) ±\u00a0${digits <= 8 ? sys.toFixed(digits) : formatNumber(Number(sys.toPrecision(2)))} (window)`;
  }
  return text;
}

/**
 * The error of a parameter rounded to two significant digits, or a dash.
 * @param {number | null | undefined} err
 * @returns {string}
 */
export function errText(err) {
  return err === null || err === undefined || !Number.isFinite(err) ? "—" : formatNumber(Number(err.toPrecision(2)));
}

/**
 * Quality figures: a label and a hint.
 * @type {Record<string, [string, string] | undefined>}
 */
const QUALITY_TEXT = {
  chi2_dof: ["χ²/dof", "about 1 when the model fits within the errors"],
  collapse_quality: ["S", "collapse quality; about 1 when the slices agree within their errors"],
  aic: ["AIC", "lower is better"],
  n_points: ["points", ""],
  dof: ["degrees of freedom", ""],
};

/**
 * Scalar quality figures as [label, value, hint] rows.
 * @param {Record<string, unknown> | null | undefined} quality
 * @returns {Array<[string, string, string]>}
 */
export function qualityRows(quality) {
  if (!quality) return [];
  /** @type {Array<[string, string, string]>} */
  const rows = [];
  for (const [key, value] of Object.entries(quality)) {
    if (typeof value !== "number" && typeof value !== "string" && typeof value !== "boolean") continue;
    const known = QUALITY_TEXT[key];
    const label = known ? known[0] : key.replace(/_/g, " ");
    const text = typeof value === "number" ? formatNumber(value) : String(value);
    rows.push([label, text, known ? known[1] : ""]);
  }
  return rows;
}

/**
 * Splits an identifier into words: "MaxItersReached" and
 * "max_iters_reached" both read "max iters reached".
 * @param {string} id
 * @returns {string}
 */
function words(id) {
  return id
    .replace(/([a-z0-9])([A-Z])/g, "$1 $2")
    .replace(/[_-]+/g, " ")
    .trim()
    .toLowerCase();
}

/**
 * Why a fit stopped, in plain words, and whether that is a worry.
 * @param {unknown} termination
 * @returns {{text: string, worry: boolean}}
 */
export function terminationText(termination) {
  /** @type {string} */
  let raw;
  /** @type {string} */
  let detail = "";
  if (typeof termination === "string") raw = termination;
  else if (termination && typeof termination === "object") {
    const entries = Object.entries(termination);
    const first = entries[0];
    if (entries.length === 1 && first) {
      raw = first[0];
      if (typeof first[1] === "string" || typeof first[1] === "number") detail = String(first[1]);
    } else {
      const reason = /** @type {Record<string, unknown>} */ (termination).reason ?? /** @type {Record<string, unknown>} */ (termination).kind;
      raw =
        typeof reason === "string"
          ? reason
          : entries
              .filter(([, v]) => typeof v === "string" || typeof v === "number" || typeof v === "boolean")
              .map(([k, v]) => `${k} ${typeof v === "number" ? formatNumber(v) : String(v)}`)
              .join(", ") || "not reported";
    }
  } else raw = "not reported";
  const w = words(raw);
  const worry = /(max|limit|budget|fail|diverg|not converged|abort|cancel|nan|boundary|edge)/.test(w);
  const said = `${w}${detail ? `: ${detail}` : ""}`;
  const fine = /converge|solved|closed form|exact|\bok\b|tolerance/.test(w) && !worry;
  const text = fine ? (w.startsWith("converged") ? said : `converged (${said})`) : `${said}${worry ? " — treat the numbers with care" : ""}`;
  return { text, worry };
}

/**
 * The parameter names of a fit, the physically central ones first.
 * @param {FitResult} fit
 * @returns {string[]}
 */
export function parameterOrder(fit) {
  const order = ["z", "D", "mu", "gamma0", "alpha"];
  return Object.keys(fit.parameters ?? {}).sort((a, b) => {
    const ia = order.indexOf(a);
    const ib = order.indexOf(b);
    return (ia < 0 ? 99 : ia) - (ib < 0 ? 99 : ib) || a.localeCompare(b);
  });
}

/**
 * One line of a fit: its estimator and main parameters with errors,
 * e.g. "Automatic collapse: z = 1.502 ± 0.041".
 * @param {FitResult} fit
 * @returns {string}
 */
export function fitSummary(fit) {
  const names = parameterOrder(fit);
  const parts = names.slice(0, 3).map((name) => {
    const p = /** @type {FitParameter} */ (fit.parameters[name]);
    return `${parameterText(name)[0]} = ${parameterValue(p)}`;
  });
  return `${methodName(fit.method)}${parts.length > 0 ? ": " + parts.join(", ") : ""}`;
}
