// Figures of the side views: pinned z and D across runs, the site-resolved
// correlations of shot datasets with their sum rule, and coupling matrices
// with their power-law fit.

import { FIT_METHODS } from "./api.js";
import { methodName } from "./fitformat.js";
import { formatNumber } from "./format.js";
import {
  categoryColours,
  mapColourScale,
} from "./palette.js";
import {
  INK,
  GRID,
  ACCENT,
  DATA_INK,
  FIT_INK,
  fs,
  SYMBOLS,
  baseLayout,
  config,
  plain,
  timeTitle,
} from "./plotcore.js";
/** @typedef {import("./plotcore.js").PlotObject} PlotObject */
/** @typedef {import("./plotcore.js").WindowMarks} WindowMarks */


/**
 * @typedef {object} ComparisonPoint
 * @property {number} alpha
 * @property {number} value
 * @property {number | null} err
 * @property {string} method
 * @property {string} label dataset name and entry
 */

/**
 * Pinned z against nominal α, with the expected z = min(2α − 1, 2) of the
 * long-range lattice walk, and D against α. Points grouped by estimator.
 * @param {HTMLElement} elZ
 * @param {HTMLElement} elD
 * @param {{z: ComparisonPoint[], D: ComparisonPoint[]}} input
 * @returns {Promise<unknown>}
 */
export function drawComparison(elZ, elD, input) {
  // Each estimator keeps its colour and marker whatever else is pinned or
  // retracted: its place in the fixed list of estimators picks them.
  const known = /** @type {readonly string[]} */ (FIT_METHODS);
  const seen = [...new Set([...input.z, ...input.D].map((p) => p.method))];
  const extra = seen.filter((m) => !known.includes(m)).sort();
  const order = [...known, ...extra];
  const methods = order.filter((m) => seen.includes(m));
  const palette = categoryColours(order.length);
  const colours = methods.map((m) => palette[order.indexOf(m)]);
  const symbols = methods.map((m) => SYMBOLS[order.indexOf(m) % SYMBOLS.length]);
  /**
   * @param {ComparisonPoint[]} points
   * @param {string} what
   * @returns {PlotObject[]}
   */
  const groups = (points, what) =>
    methods
      .map((m, k) => {
        const mine = points.filter((p) => p.method === m);
        return {
          type: "scatter",
          mode: "markers",
          name: methodName(m),
          legendgroup: m,
          x: mine.map((p) => p.alpha),
          y: mine.map((p) => p.value),
          text: mine.map((p) => p.label),
          error_y: { type: "data", array: mine.map((p) => p.err ?? 0), visible: true, color: colours[k], thickness: 2, width: 6 },
          marker: { color: colours[k], size: 13, symbol: symbols[k], line: { color: "#ffffff", width: 1 } },
          hovertemplate: `%{text}<br>α = %{x}<br>${what} = %{y:.4~g}<extra>${plain(methodName(m))}</extra>`,
        };
      })
      .filter((t) => t.x.length > 0);
  const alphas = [...input.z, ...input.D].map((p) => p.alpha);
  const lo = Math.max(0.5, Math.min(0.6, ...alphas) - 0.2);
  const hi = Math.max(2.2, ...alphas) + 0.2;
  /** @type {number[]} */
  const la = [];
  for (let a = lo; a <= hi + 1e-9; a += (hi - lo) / 200) la.push(a);
  /** @type {PlotObject} */
  const expected = {
    type: "scatter",
    mode: "lines",
    name: "z = min(2α − 1, 2)",
    x: la,
    y: la.map((a) => Math.min(2 * a - 1, 2)),
    line: { color: ACCENT, width: 3, dash: "dash" },
    hoverinfo: "skip",
  };
  // Below the curve's plateau at z = 2, where pinned points rarely sit.
  const legend = {
    font: { size: fs(15) },
    bgcolor: "rgba(255,255,255,0.9)",
    bordercolor: GRID,
    borderwidth: 1,
    x: 0.99,
    xanchor: "right",
    y: 0.02,
    yanchor: "bottom",
  };
  const zTop = Math.max(2.3, ...input.z.map((p) => p.value + (p.err ?? 0)));
  const zBottom = Math.min(0, ...input.z.map((p) => p.value - (p.err ?? 0)));
  const layoutZ = baseLayout(elZ, "nominal α", "z (pinned)");
  layoutZ.showlegend = true;
  layoutZ.legend = legend;
  layoutZ.margin = { l: 64, r: 16, t: 16, b: 52 };
  /** @type {PlotObject} */ (layoutZ.xaxis).range = [lo, hi];
  /** @type {PlotObject} */ (layoutZ.yaxis).range = [zBottom, zTop + 0.1];
  const layoutD = baseLayout(elD, "nominal α", "D (pinned, sites<sup>z</sup>/time)", { yType: "log" });
  layoutD.showlegend = false;
  layoutD.margin = { l: 64, r: 16, t: 16, b: 52 };
  /** @type {PlotObject} */ (layoutD.xaxis).range = [lo, hi];
  if (input.D.length === 0) {
    // An empty log axis would show an arbitrary range; say why it is empty instead.
    layoutD.annotations = [
      { text: "No pinned D yet", xref: "paper", yref: "paper", x: 0.5, y: 0.5, showarrow: false, font: { size: fs(17), color: "#464d5a" } },
    ];
    /** @type {PlotObject} */ (layoutD.yaxis).showticklabels = false;
  }
  return Promise.all([
    Plotly.react(elZ, [expected, ...groups(input.z, "z")], layoutZ, config()),
    Plotly.react(elD, groups(input.D, "D"), layoutD, config()),
  ]);
}

/**
 * Site-resolved correlations of one source: site i across, t upwards,
 * C_ij(t) as colour on a linear scale (the estimates may dip below 0), with
 * the source column outlined.
 * @param {HTMLElement} el
 * @param {{sites: number[], t: number[], C: Array<Array<number | null>>, source: number, timeUnit: string, revision: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawSiteMap(el, input) {
  const unit = plain(input.timeUnit || "");
  /** @type {PlotObject} */
  const trace = {
    type: "heatmap",
    x: input.sites,
    y: input.t,
    z: input.C,
    colorscale: mapColourScale(),
    colorbar: {
      title: { text: `C<sub>i${input.source}</sub>(t)`, side: "right", font: { size: fs(18) } },
      tickfont: { size: fs(16) },
      thickness: 20,
      outlinewidth: 0,
      ticklabeloverflow: "allow",
      exponentformat: "power",
    },
    hoverongaps: false,
    hovertemplate: `i = %{x}<br>t = %{y:.4~g} ${unit}<br>C = %{z:.4~g}<extra></extra>`,
  };
  const layout = baseLayout(el, "site i", timeTitle(input.timeUnit));
  layout.margin = { l: 72, r: 16, t: 20, b: 56 };
  layout.uirevision = input.revision;
  layout.shapes = [
    {
      type: "rect",
      xref: "x",
      yref: "paper",
      x0: input.source - 0.5,
      x1: input.source + 0.5,
      y0: 0,
      y1: 1,
      line: { color: ACCENT, width: 2, dash: "dash" },
      fillcolor: "rgba(0,0,0,0)",
    },
  ];
  return Plotly.react(el, [trace], layout, config());
}

/**
 * The site-resolved sum rule Σ_i C_ij(t) with its errors, the reference at 1
 * and the times the server flagged as departing from 1 marked with crosses.
 * @param {HTMLElement} el
 * @param {{points: Array<{t: number, sum: number, err: number | null, departs: boolean}>, source: number, timeUnit: string, revision: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawSiteSumRule(el, input) {
  const { points, timeUnit } = input;
  const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
  /** @type {PlotObject} */
  const data = {
    type: "scatter",
    mode: "lines+markers",
    name: `Σᵢ C_i${input.source}(t)`,
    x: points.map((p) => p.t),
    y: points.map((p) => p.sum),
    line: { color: DATA_INK, width: 2.5 },
    marker: { color: DATA_INK, size: 9 },
    hovertemplate: `t = %{x:.4~g}${unit}<br>Σ C = %{y:.5~g}<extra></extra>`,
  };
  if (points.some((p) => p.err !== null)) {
    data.error_y = { type: "data", array: points.map((p) => p.err ?? 0), visible: true, color: DATA_INK, thickness: 1.5, width: 5 };
  }
  const off = points.filter((p) => p.departs);
  /** @type {PlotObject} */
  const departs = {
    type: "scatter",
    mode: "markers",
    name: "departs from 1",
    x: off.map((p) => p.t),
    y: off.map((p) => p.sum),
    marker: { color: ACCENT, size: 16, symbol: "x-thin-open", line: { width: 3, color: ACCENT } },
    hovertemplate: `t = %{x:.4~g}${unit}<br>Σ C = %{y:.5~g}: departs from 1<extra></extra>`,
  };
  const ts = points.map((p) => p.t);
  /** @type {PlotObject} */
  const reference = {
    type: "scatter",
    mode: "lines",
    name: "Σ = 1",
    x: [Math.min(...ts), Math.max(...ts)],
    y: [1, 1],
    line: { color: INK, width: 1.5, dash: "dash" },
    hoverinfo: "skip",
  };
  const layout = baseLayout(el, timeTitle(timeUnit), "Σᵢ C_ij(t)");
  layout.showlegend = true;
  layout.legend = { ...(/** @type {PlotObject} */ (layout.legend)), orientation: "h", x: 0, xanchor: "left", y: 1.02, yanchor: "bottom", borderwidth: 0, bgcolor: "rgba(255,255,255,0)" };
  layout.margin = { l: 72, r: 24, t: 44, b: 56 };
  layout.uirevision = input.revision;
  return Plotly.react(el, [reference, data, departs], layout, config());
}

/**
 * A coupling matrix as a map of log10 |J_ij|; zero and missing entries are
 * left blank (the diagonal usually is).
 * @param {HTMLElement} el
 * @param {{matrix: Array<Array<number | null>>}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawCouplingMatrix(el, input) {
  const z = input.matrix.map((row) => row.map((v) => (v === null || v === 0 || !Number.isFinite(v) ? null : Math.log10(Math.abs(v)))));
  const n = input.matrix.length;
  const idx = Array.from({ length: n }, (_, i) => i);
  /** @type {PlotObject} */
  const trace = {
    type: "heatmap",
    x: idx,
    y: idx,
    z,
    customdata: input.matrix,
    colorscale: mapColourScale(),
    colorbar: { title: { text: "log₁₀ |J<sub>ij</sub>|", side: "right", font: { size: fs(18) } }, tickfont: { size: fs(16) }, thickness: 20, outlinewidth: 0, ticklabeloverflow: "allow" },
    hoverongaps: false,
    hovertemplate: "i = %{y}, j = %{x}<br>J = %{customdata:.4~g}<extra></extra>",
  };
  const layout = baseLayout(el, "site j", "site i");
  /** @type {PlotObject} */ (layout.yaxis).autorange = "reversed";
  /** @type {PlotObject} */ (layout.yaxis).scaleanchor = "x";
  layout.margin = { l: 72, r: 16, t: 20, b: 56 };
  return Plotly.react(el, [trace], layout, config());
}

/**
 * |J_ij| against |i − j| on log–log axes with the server's fitted power law
 * J / r^α drawn through them. The line's points are the returned J and α
 * evaluated at the distances shown: display of the server's numbers.
 * @param {HTMLElement} el
 * @param {{r: number[], J: number[], fit: {J: number, alpha: number}}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawCouplingDecay(el, input) {
  /** @type {PlotObject} */
  const data = {
    type: "scatter",
    mode: "markers",
    name: "|J_ij| of the matrix",
    x: input.r,
    y: input.J,
    marker: { color: DATA_INK, size: 9, opacity: 0.8 },
    hovertemplate: "|i − j| = %{x}<br>|J| = %{y:.4~g}<extra></extra>",
  };
  const rMax = Math.max(1, ...input.r);
  /** @type {number[]} */
  const rs = [];
  for (let k = 0; k <= 60; k += 1) rs.push(Math.pow(rMax, k / 60));
  /** @type {PlotObject} */
  const line = {
    type: "scatter",
    mode: "lines",
    name: `fit J / r^α, α = ${formatNumber(input.fit.alpha)}`,
    x: rs,
    y: rs.map((r) => input.fit.J / Math.pow(r, input.fit.alpha)),
    line: { color: FIT_INK, width: 2.5 },
    hoverinfo: "skip",
  };
  const layout = baseLayout(el, "|i − j| (sites)", "|J_ij|", { xType: "log", yType: "log" });
  layout.showlegend = true;
  layout.legend = { ...(/** @type {PlotObject} */ (layout.legend)), x: 1, xanchor: "right", y: 1, yanchor: "top" };
  return Plotly.react(el, [data, line], layout, config());
}

// ---- i10-verdict: the local exponent z_eff(t) ----

