// The dataset's banner: the verdict of the server's analysis (transport
// class, z ± stat ± window, D ± stat ± window with units, the estimator and
// why, the reasons the others were set aside). The same analysis, windows
// and bootstrap count as `spreadscope analyze` with its defaults, so the page
// and the command line show the same verdict. Owns the banner element, which
// it places under the dataset's title. Knows nothing about plotting.

import { emit, on } from "./bus.js";
import { byId, h } from "./dom.js";
import { withTwoErrors } from "./fitformat.js";
import { drawLocalExponent, plottingAvailable } from "./plot.js";
import { refreshBanner, setBannerSource } from "./present.js";
import { windowTexts } from "./windows.js";
import { formulaNodes } from "./words.js";

/** Which dataset the banner belongs to, so a late answer is dropped. */
let showing = "";

/** @returns {HTMLElement} the banner, made on first use */
function banner() {
  const found = document.getElementById("verdict-banner");
  if (found) return found;
  const el = h("div", { id: "verdict-banner", class: "verdict-banner", role: "status", "aria-live": "polite", "data-testid": "verdict-banner" });
  byId("dataset-title", HTMLElement).after(el);
  return el;
}

/**
 * A value with both errors, or a dash.
 * @param {number | null} v
 * @param {number | null} stat
 * @param {number | null} sys
 * @returns {string}
 */
function twoErrors(v, stat, sys) {
  return v === null ? "—" : withTwoErrors(v, stat, sys);
}

/** The analysis last shown per dataset id, for the presentation banner. @type {Map<string, import("./api.js").FitResult>} */
const verdicts = new Map();

/** @type {Record<string, string>} */
const CLASS_WORDS = {
  ballistic: "Ballistic",
  levy: "Lévy flight",
  diffusive: "Diffusive",
  subdiffusive: "Subdiffusive",
  undetermined: "Undetermined",
};

/**
 * Draws a verdict into the banner, with the local-exponent picture of the
 * analysis report when it carries one.
 * @param {import("./api.js").Verdict} v
 * @param {Record<string, unknown>} [report]
 * @param {string} [unit]
 */
export function renderVerdict(v, report = {}, unit = "") {
  const lines = [
    h("strong", { class: "verdict-class", "data-class": v.class }, [CLASS_WORDS[v.class] ?? v.class]),
    h("span", { class: "verdict-z" }, [` z = ${twoErrors(v.z, v.z_err_stat, v.z_err_sys)}`]),
  ];
  if (v.D !== null) lines.push(h("span", { class: "verdict-d" }, [`, D = ${twoErrors(v.D, v.D_err_stat, v.D_err_sys)} `, ...formulaNodes(v.D_units)]));
  if (v.estimator) lines.push(h("span", { class: "muted" }, [` — from the ${v.estimator}`]));
  const why = v.estimator ? [`The ${v.estimator} was chosen: ${v.why}.`] : [];
  const reasons = h("details", {}, [h("summary", {}, ["Why"]), h("ul", {}, [...why, ...v.reasons, v.D_convention].map((r) => h("li", {}, formulaNodes(r))))]);
  banner().replaceChildren(h("p", {}, lines), reasons);
  const picture = /** @type {any} */ (report.local_exponent_picture);
  if (picture && Array.isArray(picture.z_eff) && picture.z_eff.length > 0 && plottingAvailable()) {
    const figure = h("div", { class: "plot plot-small", "data-testid": "local-exponent-plot" });
    banner().append(h("details", {}, [h("summary", {}, ["Local exponent z_eff(t) and z against the window start"]), figure]));
    void drawLocalExponent(figure, { z_eff: picture.z_eff, scan: picture.scan ?? [], references: picture.references ?? [], unit });
  }
}

/**
 * Runs the analysis of a dataset with the server's defaults and shows its
 * verdict as the dataset's banner.
 * @param {import("./api.js").SessionApi} api
 * @param {import("./api.js").DatasetDetail} detail
 */
export async function showVerdictFor(api, detail) {
  const id = String(detail.id);
  showing = id;
  banner().replaceChildren(h("p", { class: "muted" }, ["Verdict: analysing…"]));
  try {
    const result = await api.fit(id, { method: "analysis", windows: {}, options: {} });
    if (showing !== id || !result.verdict) return;
    verdicts.set(id, result);
    emit("verdict", { dataset: id, result });
    refreshBanner();
    renderVerdict(result.verdict, result.report, detail.meta.time_unit);
  } catch (e) {
    if (showing !== id) return;
    banner().replaceChildren(h("p", { class: "muted" }, [`Verdict not available: ${e instanceof Error ? e.message : String(e)}`]));
  }
}

on("fit", (fit) => {
  if (fit.method === "analysis" && fit.verdict && String(fit.dataset) === showing) {
    renderVerdict(fit.verdict, fit.report);
    emit("verdict", { dataset: String(fit.dataset), result: fit });
  }
});

// The presentation banner shows the dataset's verdict once it is known.
setBannerSource((d) => {
  const result = verdicts.get(String(d.id));
  const v = result?.verdict;
  if (result === undefined || v === undefined) return null;
  const windows = windowTexts(result.windows, d.meta.time_unit).map((w) => w.text);
  /** @type {Array<{name: string, value: string, unit?: string}>} */
  const items = [{ name: "z", value: twoErrors(v.z, v.z_err_stat, v.z_err_sys) }];
  if (v.D !== null) items.push({ name: "D", value: twoErrors(v.D, v.D_err_stat, v.D_err_sys), unit: v.D_units });
  return { heading: `${CLASS_WORDS[v.class] ?? v.class} (${v.estimator})`, items, footnote: [windows.length > 0 ? `windows ${windows.join(", ")}` : "", v.D_convention].filter((t) => t !== "").join("; ") };
});
