// The only module that touches the vendored plotting library (the global
// `Plotly` from web/vendor/plotly). It turns arrays the server sent into the
// four figures of the dashboard and owns their look: fonts sized for a
// projector, the colour ramps of palette.js, axis titles that carry units.
// It computes no physics: the only arithmetic here is rescaling for display
// (log10 of |C| with a floor for the log colour map).

import { formatNumber } from "./format.js";
import { mapColourScale, orderedSeriesColours } from "./palette.js";

const INK = "#15181d";
const GRID = "#dedad1";
const ACCENT = "#a3195b";
const DATA_INK = "#1f3f8f";
const FONT_FAMILY =
  'system-ui, -apple-system, "Segoe UI", "Noto Sans", "DejaVu Sans", "Liberation Sans", sans-serif';

/** Marker shapes cycled through the time slices so that order never rests on colour alone. */
const SYMBOLS = ["circle", "square", "diamond", "triangle-up", "triangle-down", "pentagon", "hexagon", "star", "cross", "x"];

/** @typedef {Record<string, unknown>} PlotObject */

/**
 * @returns {boolean} whether the vendored library has loaded
 */
export function plottingAvailable() {
  return typeof Plotly !== "undefined";
}

/**
 * An axis in the house style.
 * @param {string} title axis title including its unit
 * @param {"linear" | "log"} type
 * @param {number} lengthPx room the axis has on screen, in CSS pixels
 * @returns {PlotObject}
 */
function axis(title, type, lengthPx) {
  return {
    title: { text: title, font: { size: 19, color: INK }, standoff: 12 },
    type,
    tickfont: { size: 16, color: INK },
    gridcolor: GRID,
    zerolinecolor: "#b9b4a8",
    zerolinewidth: 1.5,
    linecolor: INK,
    linewidth: 1.5,
    mirror: true,
    ticks: "outside",
    tickcolor: INK,
    ticklen: 6,
    automargin: true,
    exponentformat: "power",
    // On long log axes label only 2 and 5 between decades (the full 2…9 row
    // is unreadable from the back of a room); on short ones whole decades.
    ...(type === "log" ? { dtick: lengthPx >= 250 ? "D2" : 1 } : {}),
  };
}

/**
 * @param {HTMLElement} el the plot's container, whose size picks tick density
 * @param {string} xTitle
 * @param {string} yTitle
 * @param {{xType?: "linear" | "log", yType?: "linear" | "log"}} [types]
 * @returns {PlotObject}
 */
function baseLayout(el, xTitle, yTitle, types = {}) {
  return {
    font: { family: FONT_FAMILY, size: 16, color: INK },
    paper_bgcolor: "#ffffff",
    plot_bgcolor: "#ffffff",
    margin: { l: 72, r: 24, t: 20, b: 56 },
    xaxis: axis(xTitle, types.xType ?? "linear", el.clientWidth - 160),
    yaxis: axis(yTitle, types.yType ?? "linear", el.clientHeight - 100),
    hoverlabel: { font: { family: FONT_FAMILY, size: 16 }, bgcolor: "#ffffff", bordercolor: INK },
    legend: {
      font: { size: 16 },
      bgcolor: "rgba(255,255,255,0.85)",
      bordercolor: GRID,
      borderwidth: 1,
    },
    showlegend: false,
  };
}

/** @returns {PlotObject} */
function config() {
  return {
    responsive: true,
    displaylogo: false,
    modeBarButtonsToRemove: ["lasso2d", "select2d", "autoScale2d"],
    toImageButtonOptions: { format: "png", scale: 2, filename: "spreadscope-figure" },
  };
}

/**
 * Makes text typed by people safe inside plotly labels, which read a few
 * HTML-like tags and, in hover templates, `%{…}` placeholders.
 * @param {string} text
 * @returns {string}
 */
function plain(text) {
  return text.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;").replace(/%\{/g, "%\u200b{");
}

/**
 * @param {string} unit time unit from the dataset's metadata, possibly empty
 * @returns {string} axis title for time
 */
function timeTitle(unit) {
  return unit ? `t (${plain(unit)})` : "t (time unit not set)";
}

/**
 * @typedef {object} MapInput
 * @property {number[]} x sites
 * @property {number[]} t times
 * @property {Array<Array<number | null>>} C times × sites, null = missing
 * @property {string} timeUnit
 * @property {"linear" | "log"} scale
 * @property {number} floor smallest |C| shown on the log scale
 * @property {"linear" | "log"} tScale time axis; every t must be > 0 for "log"
 * @property {string} revision zoom and pan survive redraws while this stays the same
 */

/**
 * Space–time map: x across, t upwards, C(x,t) as colour.
 * @param {HTMLElement} el
 * @param {MapInput} input
 * @returns {Promise<HTMLElement>}
 */
export function drawMap(el, input) {
  const { x, t, C, timeUnit, scale, floor, tScale } = input;
  /** @type {Array<Array<number | null>>} */
  let z = C;
  /** @type {PlotObject} */
  let colorbar = {
    title: { text: "C(x,t)", side: "right", font: { size: 18 } },
    tickfont: { size: 16 },
    thickness: 20,
    outlinewidth: 0,
    exponentformat: "power",
  };
  /** @type {PlotObject} */
  const range = {};
  if (scale === "log") {
    const logFloor = Math.log10(floor);
    let top = logFloor;
    z = C.map((row) =>
      row.map((v) => {
        if (v === null) return null;
        const l = Math.log10(Math.max(Math.abs(v), floor));
        if (l > top) top = l;
        return l;
      }),
    );
    if (top <= logFloor) top = logFloor + 1;
    /** @type {number[]} */
    const tickvals = [];
    for (let k = Math.ceil(logFloor); k <= Math.floor(top); k += 1) tickvals.push(k);
    colorbar = {
      ...colorbar,
      title: { text: "|C(x,t)|", side: "right", font: { size: 18 } },
      tickmode: "array",
      tickvals,
      // The floor's own tick reads "≤": every smaller |C| is painted with it.
      ticktext: tickvals.map((k) => `${k === logFloor ? "≤" : ""}10<sup>${k}</sup>`),
    };
    range.zmin = logFloor;
    range.zmax = top;
  }
  const unit = plain(timeUnit || "");
  /** @type {PlotObject} */
  const trace = {
    type: "heatmap",
    x,
    y: t,
    z,
    customdata: C,
    colorscale: mapColourScale(),
    colorbar,
    hoverongaps: false,
    hovertemplate: `x = %{x} sites<br>t = %{y:.4~g} ${unit}<br>C = %{customdata:.4~g}<extra></extra>`,
    ...range,
  };
  const layout = baseLayout(el, "x (sites)", timeTitle(timeUnit), { yType: tScale });
  layout.margin = { l: 72, r: 16, t: 20, b: 56 };
  layout.uirevision = input.revision;
  return Plotly.react(el, [trace], layout, config());
}

/**
 * @typedef {object} SliceSeries
 * @property {number} t
 * @property {Array<number | null>} C values at each site
 * @property {Array<number | null> | null} err one-sigma errors, when the data have them
 */

/**
 * Time slices C(x) at chosen times, coloured early (indigo) to late (amber).
 * @param {HTMLElement} el
 * @param {{x: number[], series: SliceSeries[], timeUnit: string, yScale: "linear" | "log", revision: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawSlices(el, input) {
  const { x, series, timeUnit, yScale } = input;
  const colours = orderedSeriesColours(series.length);
  const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
  const traces = series.map((s, i) => {
    const colour = colours[i] ?? INK;
    /** @type {PlotObject} */
    const trace = {
      type: "scatter",
      mode: "lines+markers",
      name: formatNumber(s.t),
      x,
      y: s.C,
      line: { color: colour, width: 2.5 },
      marker: { color: colour, size: 8, symbol: SYMBOLS[i % SYMBOLS.length] },
      connectgaps: false,
      hovertemplate: `t = ${formatNumber(s.t)}${unit}<br>x = %{x} sites<br>C = %{y:.4~g}<extra></extra>`,
    };
    if (s.err) {
      trace.error_y = { type: "data", array: s.err, visible: true, color: colour, thickness: 1.5, width: 4 };
    }
    return trace;
  });
  const layout = baseLayout(el, "x (sites)", "C(x,t)", { yType: yScale });
  layout.showlegend = true;
  // Outside the axes (inside, the legend hides the tails): on the right when
  // there is room, above the axes in a narrow panel.
  const narrow = el.clientWidth < 700;
  layout.legend = {
    ...(/** @type {PlotObject} */ (layout.legend)),
    ...(narrow
      ? { orientation: "h", x: 0, xanchor: "left", y: 1.02, yanchor: "bottom" }
      : { x: 1.01, xanchor: "left", y: 1, yanchor: "top" }),
    title: { text: timeTitle(timeUnit), font: { size: 16 } },
    borderwidth: 0,
  };
  layout.uirevision = input.revision;
  return Plotly.react(el, traces, layout, config());
}

/**
 * Autocorrelation C(0,t) on log–log axes with error bars.
 * @param {HTMLElement} el
 * @param {{points: Array<{t: number, C: number, err: number | null}>, timeUnit: string, revision: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawAutocorrelation(el, input) {
  const { points, timeUnit } = input;
  const hasErr = points.some((p) => p.err !== null);
  const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
  /** @type {PlotObject} */
  const trace = {
    type: "scatter",
    mode: "lines+markers",
    x: points.map((p) => p.t),
    y: points.map((p) => p.C),
    line: { color: DATA_INK, width: 2.5 },
    marker: { color: DATA_INK, size: 9 },
    hovertemplate: `t = %{x:.4~g}${unit}<br>C(0,t) = %{y:.4~g}<extra></extra>`,
  };
  if (hasErr) {
    trace.error_y = {
      type: "data",
      array: points.map((p) => p.err),
      visible: true,
      color: DATA_INK,
      thickness: 1.5,
      width: 5,
    };
  }
  const layout = baseLayout(el, timeTitle(timeUnit), "C(0,t)", { xType: "log", yType: "log" });
  layout.uirevision = input.revision;
  return Plotly.react(el, [trace], layout, config());
}

/**
 * The sum Σ_x C(x,t) against t with its errors and the reference line at 1.
 * Points computed from incomplete rows get open markers.
 * @param {HTMLElement} el
 * @param {{points: Array<{t: number, sum: number, err: number | null, complete: boolean, present: boolean | number}>, timeUnit: string, tScale: "linear" | "log", revision: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawSumRule(el, input) {
  const { points, timeUnit, tScale } = input;
  const hasErr = points.some((p) => p.err !== null);
  const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
  /** @type {PlotObject} */
  const trace = {
    type: "scatter",
    mode: "lines+markers",
    x: points.map((p) => p.t),
    y: points.map((p) => p.sum),
    customdata: points.map((p) => (typeof p.present === "number" ? String(p.present) : p.complete ? "all" : "incomplete")),
    line: { color: DATA_INK, width: 2.5 },
    marker: {
      color: DATA_INK,
      size: 10,
      symbol: points.map((p) => (p.complete ? "circle" : "circle-open")),
      line: { width: 2, color: DATA_INK },
    },
    hovertemplate: `t = %{x:.4~g}${unit}<br>Σ C = %{y:.5~g}<br>sites present: %{customdata}<extra></extra>`,
  };
  if (hasErr) {
    trace.error_y = {
      type: "data",
      array: points.map((p) => p.err),
      visible: true,
      color: DATA_INK,
      thickness: 1.5,
      width: 5,
    };
  }
  const ts = points.map((p) => p.t);
  /** @type {PlotObject} */
  const reference = {
    type: "scatter",
    mode: "lines",
    name: "Σ = 1 (conserved total)",
    x: [Math.min(...ts), Math.max(...ts)],
    y: [1, 1],
    line: { color: ACCENT, width: 2.5, dash: "dash" },
    hoverinfo: "skip",
  };
  trace.name = "Σₓ C(x,t) from the data";
  const layout = baseLayout(el, timeTitle(timeUnit), "Σₓ C(x,t)", { xType: tScale });
  layout.showlegend = true;
  layout.legend = {
    ...(/** @type {PlotObject} */ (layout.legend)),
    orientation: "h",
    x: 0,
    xanchor: "left",
    y: 1.02,
    yanchor: "bottom",
    borderwidth: 0,
    bgcolor: "rgba(255,255,255,0)",
  };
  layout.margin = { l: 72, r: 24, t: 44, b: 56 };
  layout.uirevision = input.revision;
  return Plotly.react(el, [reference, trace], layout, config());
}

/**
 * Refits a drawn plot to its container after the container changed size.
 * @param {HTMLElement} el
 */
export function fitToContainer(el) {
  if (plottingAvailable() && el.classList.contains("js-plotly-plot")) {
    void Plotly.Plots.resize(el);
  }
}

/**
 * Removes a plot so that a message can stand in its place.
 * @param {HTMLElement} el
 */
export function clearPlot(el) {
  if (plottingAvailable()) Plotly.purge(el);
  el.replaceChildren();
}
