// The only module that touches the vendored plotting library (the global
// `Plotly` from web/vendor/plotly). It turns arrays the server sent into the
// figures of the dashboard and owns their look: fonts sized for a projector
// (larger still in large-text mode), the colour ramps of palette.js, axis
// titles that carry units, the shaded fit windows, overlays of fits and
// theory, the figure downloads and the drag-to-choose-a-window hook.
// It computes no physics: the only arithmetic here is rescaling for display
// (log10 of |C| with a floor for the log colour map; u = x / t^{1/z} and
// y = t^{1/z} C in the collapse; the reference line z = min(2α − 1, 2);
// the power law J / r^α through the coupling fit, from the server's J and α).

import { FIT_METHODS } from "./api.js";
import { methodName } from "./fitformat.js";
import { formatNumber } from "./format.js";
import {
  categoryColours,
  divergingColourScale,
  mapColourScale,
  orderedSeriesColours,
  timeColour,
  timeColourScale,
} from "./palette.js";

const INK = "#15181d";
const GRID = "#dedad1";
const ACCENT = "#a3195b";
const DATA_INK = "#1f3f8f";
/** Fits drawn over data: a dark green that stays apart from the data's blue and the time ramp. */
const FIT_INK = "#1d6b4f";
/** Theory drawn over data. */
const THEORY_INK = "#6b4a00";
const WINDOW_FILL = "rgba(163, 25, 91, 0.07)";
const WINDOW_EDGE = "rgba(163, 25, 91, 0.75)";

/** Font scale: 1 normally, larger in large-text mode. */
let textScale = 1;

/**
 * Sets the size of plot lettering relative to the normal size; the next
 * draw of each figure uses it.
 * @param {number} scale
 */
export function setTextScale(scale) {
  textScale = scale;
}

/**
 * @param {number} px size at the normal scale
 * @returns {number}
 */
function fs(px) {
  return Math.round(px * textScale);
}
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
    title: { text: title, font: { size: fs(19), color: INK }, standoff: 12 },
    type,
    tickfont: { size: fs(16), color: INK },
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
    ...(type === "log" ? logTicks(lengthPx) : {}),
  };
}

/**
 * Tick marks of a log axis, each labelled with its full value ("0.2", "2",
 * "20", "2×10⁵") so that 0.2 and 2 never look alike. Long axes get 1, 2 and 5
 * in every decade, short ones 1 and 3, so that even an axis spanning less
 * than a decade carries two labels. Plotly shows the ticks inside the range.
 * @param {number} lengthPx room the axis has on screen, in CSS pixels
 * @returns {PlotObject}
 */
function logTicks(lengthPx) {
  const steps = lengthPx >= 250 ? [1, 2, 5] : [1, 3];
  /** @type {number[]} */
  const tickvals = [];
  /** @type {string[]} */
  const ticktext = [];
  for (let exp = -12; exp <= 12; exp += 1) {
    for (const m of steps) {
      tickvals.push(m * 10 ** exp);
      ticktext.push(logTickText(m, exp));
    }
  }
  return { tickmode: "array", tickvals, ticktext };
}

const SUPERSCRIPT = /** @type {Record<string, string>} */ ({ "-": "⁻", 0: "⁰", 1: "¹", 2: "²", 3: "³", 4: "⁴", 5: "⁵", 6: "⁶", 7: "⁷", 8: "⁸", 9: "⁹" });

/**
 * @param {number} mantissa 1 … 9
 * @param {number} exp power of ten
 * @returns {string} "0.02", "500" or "2×10⁻⁵"
 */
function logTickText(mantissa, exp) {
  if (exp >= -3 && exp <= 4) return String(Number((mantissa * 10 ** exp).toPrecision(1)));
  const power = `10${String(exp).replace(/./g, (c) => SUPERSCRIPT[c] ?? c)}`;
  return mantissa === 1 ? power : `${mantissa}×${power}`;
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
    font: { family: FONT_FAMILY, size: fs(16), color: INK },
    paper_bgcolor: "#ffffff",
    plot_bgcolor: "#ffffff",
    margin: { l: 72, r: 24, t: 20, b: 56 },
    xaxis: axis(xTitle, types.xType ?? "linear", el.clientWidth - 160),
    yaxis: axis(yTitle, types.yType ?? "linear", el.clientHeight - 100),
    hoverlabel: { font: { family: FONT_FAMILY, size: fs(16) }, bgcolor: "#ffffff", bordercolor: INK },
    legend: {
      font: { size: fs(16) },
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
 * Fit windows as drawn on a figure. Null bounds are open.
 * @typedef {object} WindowMarks
 * @property {number | null} [t_min]
 * @property {number | null} [t_max]
 * @property {number | null} [x_max]
 */

/**
 * A shaded band between two positions along one axis, with dashed edges
 * where the band ends inside the data. Shapes take data coordinates on log
 * axes too.
 * @param {"x" | "y"} along
 * @param {number} from
 * @param {number} to
 * @param {{from: boolean, to: boolean}} edges which ends to mark with a line
 * @returns {PlotObject[]}
 */
function band(along, from, to, edges) {
  const across = along === "x" ? "y" : "x";
  /** @type {PlotObject[]} */
  const shapes = [
    {
      type: "rect",
      xref: along === "x" ? "x" : "paper",
      yref: along === "y" ? "y" : "paper",
      [`${along}0`]: from,
      [`${along}1`]: to,
      [`${across}0`]: 0,
      [`${across}1`]: 1,
      fillcolor: WINDOW_FILL,
      line: { width: 0 },
      layer: "below",
    },
  ];
  for (const [on, at] of /** @type {Array<[boolean, number]>} */ ([[edges.from, from], [edges.to, to]])) {
    if (!on) continue;
    shapes.push({
      type: "line",
      xref: along === "x" ? "x" : "paper",
      yref: along === "y" ? "y" : "paper",
      [`${along}0`]: at,
      [`${along}1`]: at,
      [`${across}0`]: 0,
      [`${across}1`]: 1,
      line: { color: WINDOW_EDGE, width: 2, dash: "dash" },
      layer: "above",
    });
  }
  return shapes;
}

/**
 * Shapes marking a time window along an axis that spans [lo, hi].
 * @param {"x" | "y"} along
 * @param {WindowMarks | undefined} w
 * @param {number} lo
 * @param {number} hi
 * @returns {PlotObject[]}
 */
function timeWindowShapes(along, w, lo, hi) {
  if (!w) return [];
  const a = w.t_min ?? null;
  const b = w.t_max ?? null;
  if (a === null && b === null) return [];
  return band(along, a ?? lo, b ?? hi, { from: a !== null, to: b !== null });
}

/**
 * Shapes marking |x| ≤ x_max on an x axis.
 * @param {WindowMarks | undefined} w
 * @returns {PlotObject[]}
 */
function spaceWindowShapes(w) {
  if (!w || w.x_max === null || w.x_max === undefined) return [];
  return band("x", -w.x_max, w.x_max, { from: true, to: true });
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
 * @property {WindowMarks} [windows] fit windows to outline
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
    title: { text: "C(x,t)", side: "right", font: { size: fs(18) } },
    tickfont: { size: fs(16) },
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
      title: { text: "|C(x,t)|", side: "right", font: { size: fs(18) } },
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
  // The windows are outlined, not shaded, so the colours of the map stay true.
  layout.shapes = windowOutline(input.windows, x, t);
  return Plotly.react(el, [trace], layout, config());
}

/**
 * A dashed rectangle around the windowed part of a map.
 * @param {WindowMarks | undefined} w
 * @param {number[]} x
 * @param {number[]} t
 * @returns {PlotObject[]}
 */
function windowOutline(w, x, t) {
  if (!w) return [];
  const set = [w.t_min, w.t_max, w.x_max].some((v) => v !== null && v !== undefined);
  if (!set || x.length === 0 || t.length === 0) return [];
  const xm = w.x_max ?? null;
  return [
    {
      type: "rect",
      xref: "x",
      yref: "y",
      x0: xm === null ? Math.min(...x) - 0.5 : -xm - 0.5,
      x1: xm === null ? Math.max(...x) + 0.5 : xm + 0.5,
      y0: w.t_min ?? Math.min(...t),
      y1: w.t_max ?? Math.max(...t),
      line: { color: "#ffffff", width: 3, dash: "dash" },
      fillcolor: "rgba(0,0,0,0)",
    },
  ];
}

/**
 * @typedef {object} SliceSeries
 * @property {number} t
 * @property {Array<number | null>} C values at each site
 * @property {Array<number | null> | null} err one-sigma errors, when the data have them
 */

/**
 * A model drawn over the slices: a curve per shown time.
 * @typedef {object} SliceOverlay
 * @property {string} label legend text, e.g. "lattice walk"
 * @property {"fit" | "theory"} kind
 * @property {number[]} x
 * @property {Array<{t: number, C: Array<number | null>}>} curves
 */

/**
 * Time slices C(x) at chosen times, coloured early (indigo) to late (amber),
 * with model curves dashed in the colour of their time.
 * @param {HTMLElement} el
 * @param {{x: number[], series: SliceSeries[], timeUnit: string, yScale: "linear" | "log", revision: string, overlays?: SliceOverlay[], windows?: WindowMarks, dragmode?: "select" | "zoom"}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawSlices(el, input) {
  const { x, series, timeUnit, yScale } = input;
  const colours = orderedSeriesColours(series.length);
  const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
  /** @type {PlotObject[]} */
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
  const overlays = input.overlays ?? [];
  if (overlays.length > 0) {
    // The data step back (thinner, lighter) so that the model curves, drawn
    // after them in a dark colour on a white halo, stay visible on top.
    for (const trace of traces) {
      trace.opacity = 0.7;
      /** @type {PlotObject} */ (trace.line).width = 1.5;
      /** @type {PlotObject} */ (trace.marker).size = 6;
    }
  }
  for (const overlay of overlays) {
    const ink = overlay.kind === "theory" ? THEORY_INK : FIT_INK;
    overlay.curves.forEach((curve, k) => {
      const i = series.findIndex((s) => Math.abs(s.t - curve.t) <= 1e-9 * Math.max(1, Math.abs(s.t)));
      if (i < 0) return;
      traces.push({
        type: "scatter",
        mode: "lines",
        showlegend: false,
        hoverinfo: "skip",
        x: overlay.x,
        y: curve.C,
        line: { color: "rgba(255,255,255,0.9)", width: 6 },
        connectgaps: false,
      });
      traces.push({
        type: "scatter",
        mode: "lines",
        name: overlay.label,
        legendgroup: overlay.label,
        showlegend: k === 0,
        x: overlay.x,
        y: curve.C,
        line: { color: ink, width: 3, dash: overlay.kind === "theory" ? "dash" : "solid" },
        connectgaps: false,
        hovertemplate: `${plain(overlay.label)}<br>t = ${formatNumber(curve.t)}${unit}<br>x = %{x}<br>C = %{y:.4~g}<extra></extra>`,
      });
    });
  }
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
    title: { text: timeTitle(timeUnit), font: { size: fs(16) } },
    borderwidth: 0,
  };
  layout.uirevision = input.revision;
  layout.shapes = spaceWindowShapes(input.windows);
  applyDragmode(layout, input.dragmode, "h");
  return Plotly.react(el, traces, layout, config()).then(hookSelect);
}

/**
 * Sets how a drag on the plot acts: a horizontal selection (which the page
 * turns into a window) or a zoom. An old selection box is cleared so that
 * the shaded window is the only mark left.
 * @param {PlotObject} layout
 * @param {"select" | "zoom" | undefined} mode
 * @param {"h" | "v"} direction
 */
function applyDragmode(layout, mode, direction) {
  layout.dragmode = mode ?? "zoom";
  layout.selectdirection = direction;
  layout.selections = [];
  layout.newselection = { line: { color: ACCENT, width: 2, dash: "solid" } };
}

/**
 * A curve drawn over the autocorrelation.
 * @typedef {object} LineOverlay
 * @property {string} label
 * @property {"fit" | "theory"} kind
 * @property {number[]} t
 * @property {Array<number | null>} C
 */

/**
 * Autocorrelation C(0,t) on log–log axes with error bars, the t window
 * shaded and fitted or model curves over it.
 * @param {HTMLElement} el
 * @param {{points: Array<{t: number, C: number, err: number | null}>, timeUnit: string, revision: string, overlays?: LineOverlay[], windows?: WindowMarks, dragmode?: "select" | "zoom"}} input
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
    name: "C(0,t) from the data",
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
  const overlays = input.overlays ?? [];
  /** @type {PlotObject[]} */
  const traces = [trace];
  for (const o of overlays) {
    // Log axes show only positive values; the rest would be silently dropped.
    const keep = o.t.map((t, i) => t > 0 && (o.C[i] ?? 0) > 0);
    traces.push({
      type: "scatter",
      mode: "lines",
      name: o.label,
      x: o.t.filter((_, i) => keep[i]),
      y: o.C.filter((_, i) => keep[i]),
      line: { color: o.kind === "fit" ? FIT_INK : THEORY_INK, width: 3.5, dash: o.kind === "fit" ? "solid" : "dash" },
      hovertemplate: `${plain(o.label)}<br>t = %{x:.4~g}${unit}<br>C = %{y:.4~g}<extra></extra>`,
    });
  }
  const layout = baseLayout(el, timeTitle(timeUnit), "C(0,t)", { xType: "log", yType: "log" });
  layout.uirevision = input.revision;
  const ts = points.map((p) => p.t);
  layout.shapes = timeWindowShapes("x", input.windows, Math.min(...ts), Math.max(...ts));
  if (overlays.length > 0) {
    layout.showlegend = true;
    layout.legend = {
      ...(/** @type {PlotObject} */ (layout.legend)),
      x: 0.01,
      xanchor: "left",
      y: 0.01,
      yanchor: "bottom",
    };
  }
  applyDragmode(layout, input.dragmode, "h");
  return Plotly.react(el, traces, layout, config()).then(hookSelect);
}

/**
 * Calls back with the horizontal range of every box drawn on a plot in
 * selection mode (in data units, also on log axes). The hook is attached
 * after each draw that needs it, since plotly gives an element its event
 * methods only once a plot exists there.
 * @param {HTMLElement} el
 * @param {(range: [number, number]) => void} callback
 */
export function onRangeSelect(el, callback) {
  selectCallbacks.set(el, callback);
  hookSelect(el);
}

/** @type {WeakMap<HTMLElement, (range: [number, number]) => void>} */
const selectCallbacks = new WeakMap();
/** Plots whose selection hook is attached. @type {WeakSet<HTMLElement>} */
const selectHooked = new WeakSet();

/**
 * Attaches the selection hook of a drawn plot, once.
 * @param {HTMLElement} el
 * @returns {HTMLElement}
 */
function hookSelect(el) {
  const plot = /** @type {PlotlyElement} */ (/** @type {unknown} */ (el));
  if (selectHooked.has(el) || typeof plot.on !== "function") return el;
  selectHooked.add(el);
  plot.on("plotly_selected", (/** @type {any} */ event) => {
    const range = event?.range?.x;
    const callback = selectCallbacks.get(el);
    if (!callback || !Array.isArray(range) || range.length !== 2) return;
    const a = Number(range[0]);
    const b = Number(range[1]);
    if (!(Number.isFinite(a) && Number.isFinite(b) && a !== b)) return;
    // The shaded window replaces the selection box, which would otherwise
    // stay on the plot with its handles.
    void Plotly.relayout(el, { selections: [] });
    callback(a < b ? [a, b] : [b, a]);
  });
  return el;
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
  selectHooked.delete(el);
  el.replaceChildren();
}

/**
 * The data of a collapse figure: the windowed rows of the map.
 * @typedef {object} CollapseInput
 * @property {number[]} x sites within the |x| window
 * @property {number[]} t times within the t window, all > 0
 * @property {Array<Array<number | null>>} C rows for those times, columns for those sites
 * @property {string} timeUnit
 * @property {boolean} logTime colour by log t (a geometric time grid) or by t
 * @property {"linear" | "log"} yScale
 * @property {string} revision zoom survives redraws while this stays the same
 */

/** Most colour bands of the collapse; see CollapseFigure. */
const COLLAPSE_BANDS = 12;

/**
 * The scaling collapse y = t^{1/z} C against u = x / t^{1/z}, the slices
 * coloured by time on the time ramp with a colour bar, and the model's
 * scaling function over it. Built once per dataset and window; `setZ`
 * rescales into arrays allocated here once, so that a slider moves with
 * nothing but arithmetic and one `Plotly.react`.
 *
 * Speed (the target is ≤ 33 ms from input to redrawn plot for 60 slices of
 * 101 sites): plotly's cost grows with the number of traces far more than
 * with the number of points, so consecutive slices share a trace, separated
 * by gaps: at most 12 colour bands, each one colour of the ramp, and the
 * colour bar is stepped to match (hovering still names each point's own
 * time). The slices are lines without point markers (thousands of SVG
 * markers cost several times the lines); the axis ranges are set here from
 * the data's extent rather than by plotly's autorange, and the margins are
 * fixed, so a redraw never needs a second layout pass for new tick label
 * widths. A range the person zoomed to is kept until a double click.
 */
export class CollapseFigure {
  /** @param {HTMLElement} el */
  constructor(el) {
    this.el = el;
    /** u per band: the band's slices one after the other, NaN between. @type {Float64Array[]} */
    this.u = [];
    /** @type {Float64Array[]} */
    this.y = [];
    /** @type {Float64Array} x as numbers, shared by every slice */
    this.x = new Float64Array(0);
    /** @type {Float64Array[]} C per slice, NaN where missing */
    this.c = [];
    /** @type {number[]} */
    this.t = [];
    /** For slice i: its band and where it starts in the band's arrays. @type {Array<[number, number]>} */
    this.place = [];
    /** @type {PlotObject[]} */
    this.traces = [];
    /** @type {PlotObject} */
    this.layout = {};
    /** @type {PlotObject} */
    this.model = {};
    this.revision = 0;
    this.z = 2;
    /** @type {"linear" | "log"} */
    this.yScale = "linear";
    /** Whether the person zoomed or panned; then the ranges are theirs. */
    this.userRange = false;
    this.hooked = false;
  }

  /**
   * Replaces the data; call `setZ` next.
   * @param {CollapseInput} input
   */
  setData(input) {
    const { x, t, C, timeUnit, logTime } = input;
    this.t = t;
    this.yScale = input.yScale;
    this.userRange = false;
    this.x = Float64Array.from(x);
    this.c = C.map((row) => Float64Array.from(row, (v) => (v === null ? Number.NaN : v)));
    const n = t.length;
    const bands = Math.min(n, COLLAPSE_BANDS);
    /** First slice of each band, and one past the last. @type {number[]} */
    const edges = [];
    for (let b = 0; b <= bands; b += 1) edges.push(Math.round((b * n) / bands));
    const stride = x.length + 1;
    this.place = [];
    this.u = [];
    this.y = [];
    for (let b = 0; b < bands; b += 1) {
      const first = edges[b] ?? 0;
      const end = edges[b + 1] ?? n;
      for (let i = first; i < end; i += 1) this.place.push([b, (i - first) * stride]);
      // The gap after each slice stays NaN: it keeps the slices apart.
      this.u.push(new Float64Array((end - first) * stride).fill(Number.NaN));
      this.y.push(new Float64Array((end - first) * stride).fill(Number.NaN));
    }
    const scaleOf = (/** @type {number} */ v) => (logTime ? Math.log10(v) : v);
    const lo = scaleOf(Math.min(...t));
    const hi = scaleOf(Math.max(...t));
    const span = hi > lo ? hi - lo : 1;
    const unit = timeUnit ? ` ${plain(timeUnit)}` : "";
    /** Band boundaries on the colour bar, in scaled time. @type {number[]} */
    const cuts = [lo];
    for (let b = 1; b < bands; b += 1) {
      const before = t[(edges[b] ?? 1) - 1] ?? 0;
      const after = t[edges[b] ?? 0] ?? 0;
      cuts.push((scaleOf(before) + scaleOf(after)) / 2);
    }
    cuts.push(hi);
    /** @type {Array<[number, string]>} */
    const steps = [];
    this.traces = [];
    for (let b = 0; b < bands; b += 1) {
      const first = edges[b] ?? 0;
      const end = edges[b + 1] ?? n;
      const from = cuts[b] ?? lo;
      const to = cuts[b + 1] ?? hi;
      const colour = bands === 1 ? timeColour(0.5) : timeColour(b / (bands - 1));
      steps.push([(from - lo) / span, colour], [(to - lo) / span, colour]);
      /** Each point's own time, for hovering. @type {Array<number | null>} */
      const times = [];
      for (let i = first; i < end; i += 1) {
        for (let j = 0; j < x.length; j += 1) times.push(t[i] ?? null);
        times.push(null);
      }
      const tFirst = t[first] ?? 0;
      const tLast = t[end - 1] ?? 0;
      this.traces.push({
        type: "scatter",
        mode: "lines",
        name: end - first === 1 ? `t = ${formatNumber(tFirst)}` : `t = ${formatNumber(tFirst)} … ${formatNumber(tLast)}`,
        x: this.u[b],
        y: this.y[b],
        customdata: times,
        line: { color: colour, width: 2 },
        connectgaps: false,
        showlegend: false,
        hovertemplate: `t = %{customdata:.4~g}${unit}<br>u = %{x:.3~g}<br>y = %{y:.4~g}<extra></extra>`,
      });
    }
    /** @type {number[]} */
    const tickvals = [];
    /** @type {string[]} */
    const ticktext = [];
    if (logTime) {
      for (let k = Math.ceil(lo) - 1; k <= Math.floor(hi); k += 1) {
        for (const m of [1, 2, 5]) {
          const v = Math.log10(m) + k;
          if (v >= lo - 1e-9 && v <= hi + 1e-9) {
            tickvals.push(v);
            ticktext.push(formatNumber(m * 10 ** k));
          }
        }
      }
    }
    // A colour bar needs a trace with a colour scale; this one draws nothing.
    const colourBar = {
      type: "scatter",
      mode: "markers",
      x: [null],
      y: [null],
      hoverinfo: "skip",
      showlegend: false,
      marker: {
        color: [lo, hi],
        cmin: lo,
        cmax: hi,
        colorscale: steps.length >= 2 ? steps : timeColourScale(),
        showscale: true,
        size: 0.1,
        colorbar: {
          title: { text: timeTitle(timeUnit), side: "right", font: { size: fs(17) } },
          tickfont: { size: fs(15) },
          thickness: 18,
          outlinewidth: 0,
          len: 0.9,
          ...(logTime && tickvals.length >= 2 ? { tickmode: "array", tickvals, ticktext } : {}),
        },
      },
    };
    this.model = {
      type: "scatter",
      mode: "lines",
      name: "model",
      x: [],
      y: [],
      visible: false,
      line: { color: INK, width: 4 },
      showlegend: true,
      hovertemplate: "model<br>u = %{x:.3~g}<br>y = %{y:.4~g}<extra></extra>",
    };
    this.traces.push(colourBar, this.model);
    const layout = baseLayout(this.el, "u = x / t<sup>1/z</sup>", "y = t<sup>1/z</sup> C(x,t)", { yType: input.yScale });
    for (const name of ["xaxis", "yaxis"]) {
      const ax = /** @type {PlotObject} */ (layout[name]);
      ax.automargin = false;
      ax.autorange = false;
    }
    layout.margin = { l: fs(86), r: 8, t: 14, b: fs(64) };
    layout.showlegend = true;
    layout.legend = { ...(/** @type {PlotObject} */ (layout.legend)), x: 0.99, xanchor: "right", y: 0.99, yanchor: "top" };
    this.layout = layout;
  }

  /**
   * Rescales every slice for exponent `z` and redraws.
   * @param {number} z
   * @returns {Promise<HTMLElement>}
   */
  setZ(z) {
    this.z = z;
    const inv = 1 / z;
    const x = this.x;
    for (let i = 0; i < this.t.length; i += 1) {
      const a = Math.pow(this.t[i] ?? 1, inv);
      const [band, start] = this.place[i] ?? [0, 0];
      const u = /** @type {Float64Array} */ (this.u[band]);
      const y = /** @type {Float64Array} */ (this.y[band]);
      const c = /** @type {Float64Array} */ (this.c[i]);
      for (let j = 0; j < x.length; j += 1) {
        u[start + j] = (x[j] ?? 0) / a;
        y[start + j] = (c[j] ?? Number.NaN) * a;
      }
    }
    return this.redraw();
  }

  /**
   * Sets the model's scaling function (drawn with the next redraw), or removes it.
   * @param {{u: number[], f: number[], label: string} | null} curve
   */
  setModel(curve) {
    if (curve === null) {
      this.model.visible = false;
      this.model.x = [];
      this.model.y = [];
    } else {
      this.model.visible = true;
      this.model.x = curve.u;
      this.model.y = curve.f;
      this.model.name = curve.label;
    }
  }

  /** @returns {[number, number]} the u range on screen (the person's zoom, or the data's) */
  shownU() {
    const drawn = /** @type {{layout?: Record<string, any>}} */ (/** @type {unknown} */ (this.el)).layout;
    const range = drawn?.xaxis?.range;
    if (Array.isArray(range) && range.length === 2 && Number.isFinite(range[0]) && Number.isFinite(range[1])) return [Number(range[0]), Number(range[1])];
    return this.ranges().x;
  }

  /** @returns {[number, number]} the u range of the data at the current z */
  uExtent() {
    let lo = Infinity;
    let hi = -Infinity;
    for (const u of this.u) {
      for (const v of u) {
        if (v < lo) lo = v;
        if (v > hi) hi = v;
      }
    }
    return Number.isFinite(lo) && Number.isFinite(hi) ? [lo, hi] : [-1, 1];
  }

  /**
   * Axis ranges that hold every drawn value with a margin of 4 %; on a log
   * y axis the values more than five decades below the top are left out, so
   * that noise near zero does not squash the curves.
   * @returns {{x: [number, number], y: [number, number]}}
   */
  ranges() {
    let ylo = Infinity;
    let yhi = -Infinity;
    for (const y of this.y) {
      for (const v of y) {
        if (!(v === v)) continue; // NaN: a missing point or a gap
        if (this.yScale === "log" && !(v > 0)) continue;
        if (v < ylo) ylo = v;
        if (v > yhi) yhi = v;
      }
    }
    if (!Number.isFinite(ylo) || !Number.isFinite(yhi)) {
      ylo = this.yScale === "log" ? 1e-3 : 0;
      yhi = 1;
    }
    const floor = this.yScale === "log" ? Math.max(ylo, yhi * 1e-5) : ylo;
    // The u range covers the points that show on the y range: on a linear
    // axis those above 1 % of the top (below that a tail is a flat line and
    // noise would stretch the axis); the log axis shows the tails.
    const visible = this.yScale === "log" ? floor : 0.01 * yhi;
    let ulo = Infinity;
    let uhi = -Infinity;
    for (let b = 0; b < this.y.length; b += 1) {
      const y = /** @type {Float64Array} */ (this.y[b]);
      const u = /** @type {Float64Array} */ (this.u[b]);
      for (let k = 0; k < y.length; k += 1) {
        const v = y[k] ?? Number.NaN;
        if (!(Math.abs(v) >= visible)) continue;
        const w = u[k] ?? Number.NaN;
        if (w < ulo) ulo = w;
        if (w > uhi) uhi = w;
      }
    }
    if (!Number.isFinite(ulo) || !Number.isFinite(uhi)) [ulo, uhi] = this.uExtent();
    const padU = 0.05 * (uhi - ulo || 1);
    if (this.yScale === "log") {
      const top = Math.log10(yhi);
      const bottom = Math.log10(floor);
      const pad = 0.04 * (top - bottom || 1);
      return { x: [ulo - padU, uhi + padU], y: [bottom - pad, top + pad] };
    }
    const lowest = Math.min(0, ylo);
    const pad = 0.04 * (yhi - lowest || 1);
    return { x: [ulo - padU, uhi + padU], y: [lowest - pad, yhi + pad] };
  }

  /** @returns {Promise<HTMLElement>} */
  redraw() {
    // The arrays were changed in place; a new data revision tells Plotly so.
    this.revision += 1;
    this.layout.datarevision = this.revision;
    const xa = /** @type {PlotObject} */ (this.layout.xaxis);
    const ya = /** @type {PlotObject} */ (this.layout.yaxis);
    const drawn = /** @type {{layout?: Record<string, any>}} */ (/** @type {unknown} */ (this.el)).layout;
    if (this.userRange && drawn?.xaxis?.range && drawn?.yaxis?.range) {
      xa.range = [...drawn.xaxis.range];
      ya.range = [...drawn.yaxis.range];
    } else {
      const r = this.ranges();
      xa.range = r.x;
      ya.range = r.y;
    }
    return Plotly.react(this.el, this.traces, this.layout, config()).then((el) => {
      if (!this.hooked) {
        this.hooked = true;
        /** @type {PlotlyElement} */ (/** @type {unknown} */ (el)).on("plotly_relayout", (/** @type {any} */ ev) => {
          if (!ev || typeof ev !== "object") return;
          const keys = Object.keys(ev);
          if (keys.some((k) => k.endsWith("autorange"))) this.userRange = false;
          else if (keys.some((k) => k.startsWith("xaxis.range") || k.startsWith("yaxis.range"))) this.userRange = true;
        });
        // A double click gives the ranges back to the data.
        /** @type {PlotlyElement} */ (/** @type {unknown} */ (el)).on("plotly_doubleclick", () => {
          window.setTimeout(() => {
            this.userRange = false;
            void this.redraw();
          }, 0);
        });
      }
      return el;
    });
  }
}

/**
 * The small plot of the collapse quality S(z) from the server's scan, the
 * one-sigma range of the best z shaded, and the hand-set z marked.
 * @param {HTMLElement} el
 * @param {{scan: Array<[number, number]>, best: number | null, range: [number, number] | null, current: {z: number, S: number | null} | null}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawQualityScan(el, input) {
  const finite = input.scan.filter(([z, S]) => Number.isFinite(z) && Number.isFinite(S) && S > 0);
  /** @type {PlotObject[]} */
  const traces = [
    {
      type: "scatter",
      mode: "lines+markers",
      x: finite.map((p) => p[0]),
      y: finite.map((p) => p[1]),
      line: { color: DATA_INK, width: 2 },
      marker: { color: DATA_INK, size: 5 },
      hovertemplate: "z = %{x:.3f}<br>S = %{y:.3~g}<extra>scan</extra>",
    },
  ];
  if (input.current && input.current.S !== null && Number.isFinite(input.current.S) && input.current.S > 0) {
    traces.push({
      type: "scatter",
      mode: "markers",
      x: [input.current.z],
      y: [input.current.S],
      marker: { color: ACCENT, size: 11, symbol: "diamond", line: { color: "#ffffff", width: 1.5 } },
      hovertemplate: "slider: z = %{x:.3f}<br>S = %{y:.3~g}<extra></extra>",
    });
  }
  const ys = finite.map((p) => p[1]);
  const spread = ys.length > 1 ? Math.max(...ys) / Math.min(...ys) : 1;
  /** @type {PlotObject[]} */
  const shapes = [];
  if (input.range) shapes.push(...band("x", input.range[0], input.range[1], { from: false, to: false }).map((s) => ({ ...s, fillcolor: "rgba(29, 107, 79, 0.2)" })));
  if (input.best !== null) {
    shapes.push({ type: "line", xref: "x", yref: "paper", x0: input.best, x1: input.best, y0: 0, y1: 1, line: { color: FIT_INK, width: 2 } });
  }
  const small = {
    title: { text: "", font: { size: fs(13) } },
    tickfont: { size: fs(13), color: INK },
    gridcolor: GRID,
    linecolor: INK,
    mirror: true,
    automargin: true,
    exponentformat: "power",
    zeroline: false,
  };
  /** @type {PlotObject} */
  const layout = {
    font: { family: FONT_FAMILY, size: fs(13), color: INK },
    paper_bgcolor: "rgba(255,255,255,0.92)",
    plot_bgcolor: "#ffffff",
    margin: { l: 52, r: 8, t: 26, b: 30 },
    showlegend: false,
    title: { text: "quality S(z) — lower is better", font: { size: fs(13) }, x: 0.02, xanchor: "left", y: 0.97 },
    xaxis: { ...small, title: { text: "" } },
    yaxis: { ...small, ...(spread > 30 ? { type: "log", ...logTicks(100) } : { type: "linear", nticks: 4 }) },
    shapes,
  };
  return Plotly.react(el, traces, layout, { displayModeBar: false, responsive: true, staticPlot: false });
}

/**
 * A difference map data − model on the dataset's grid, on the diverging ramp
 * centred at zero. The colour range is symmetric and set by the 98th
 * percentile of |value| (a display choice: a few outliers would otherwise
 * wash out the rest); hovering shows every exact value.
 * @param {HTMLElement} el
 * @param {{x: number[], t: number[], values: Array<Array<number | null>>, timeUnit: string, label: string, tScale: "linear" | "log", revision: string, windows?: WindowMarks}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawDifferenceMap(el, input) {
  const magnitudes = input.values.flat().filter((v) => v !== null && Number.isFinite(v)).map((v) => Math.abs(/** @type {number} */ (v)));
  magnitudes.sort((a, b) => a - b);
  const top = magnitudes.length > 0 ? (magnitudes[Math.floor(0.98 * (magnitudes.length - 1))] ?? 1) || 1 : 1;
  const unit = plain(input.timeUnit || "");
  /** @type {PlotObject} */
  const trace = {
    type: "heatmap",
    x: input.x,
    y: input.t,
    z: input.values,
    zmin: -top,
    zmax: top,
    zmid: 0,
    colorscale: divergingColourScale(),
    hoverongaps: false,
    colorbar: {
      title: { text: plain(input.label), side: "right", font: { size: fs(17) } },
      tickfont: { size: fs(15) },
      thickness: 20,
      outlinewidth: 0,
      exponentformat: "power",
    },
    hovertemplate: `x = %{x} sites<br>t = %{y:.4~g} ${unit}<br>${plain(input.label)} = %{z:.3~g}<extra></extra>`,
  };
  const layout = baseLayout(el, "x (sites)", timeTitle(input.timeUnit), { yType: input.tScale });
  layout.margin = { l: 72, r: 16, t: 20, b: 56 };
  layout.uirevision = input.revision;
  layout.shapes = windowOutline(input.windows, input.x, input.t).map((s) => ({ ...s, line: { color: INK, width: 2.5, dash: "dash" } }));
  return Plotly.react(el, [trace], layout, config());
}

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
 * Downloads a drawn figure as PNG (twice the screen resolution) or SVG.
 * @param {HTMLElement} el
 * @param {"png" | "svg"} format
 * @param {string} filename without extension
 * @returns {Promise<unknown>}
 */
export function downloadFigure(el, format, filename) {
  if (!el.classList.contains("js-plotly-plot")) return Promise.reject(new Error("this figure is not drawn"));
  return Plotly.downloadImage(el, {
    format,
    filename,
    width: Math.max(400, el.clientWidth),
    height: Math.max(300, el.clientHeight),
    scale: format === "png" ? 2 : 1,
  });
}

/**
 * @param {HTMLElement} el
 * @returns {boolean} whether a figure is drawn in el
 */
export function isDrawn(el) {
  return el.classList.contains("js-plotly-plot");
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
    colorbar: { title: { text: "log₁₀ |J<sub>ij</sub>|", side: "right", font: { size: fs(18) } }, tickfont: { size: fs(16) }, thickness: 20, outlinewidth: 0 },
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

/**
 * z_eff(t) = 1/(−d ln C(0,t)/d ln t) with its error band, the scan of z
 * against the window start (tail fit and collapse, window end fixed), and
 * horizontal reference lines (z = 1, z = 2, z = 2α − 1 when α is known).
 * Every number drawn is the server's.
 * @param {HTMLElement} el
 * @param {{z_eff: Array<{t: number, z: number, err: number | null}>, scan: Array<{t_start: number, tail: number[] | null, collapse: number[] | null}>, references: Array<[string, number]>, unit: string}} input
 * @returns {Promise<HTMLElement>}
 */
export function drawLocalExponent(el, input) {
  const t = input.z_eff.map((p) => p.t);
  const z = input.z_eff.map((p) => p.z);
  const hi = input.z_eff.map((p) => p.z + (p.err ?? 0));
  const lo = input.z_eff.map((p) => p.z - (p.err ?? 0));
  /** @type {PlotObject[]} */
  const traces = [
    { type: "scatter", mode: "lines", x: t, y: hi, line: { width: 0 }, hoverinfo: "skip", showlegend: false },
    { type: "scatter", mode: "lines", x: t, y: lo, line: { width: 0 }, fill: "tonexty", fillcolor: "rgba(31, 63, 143, 0.15)", hoverinfo: "skip", name: "z_eff ± 1σ" },
    { type: "scatter", mode: "lines+markers", name: "local z_eff(t)", x: t, y: z, line: { color: DATA_INK, width: 2 }, marker: { size: 6 } },
  ];
  for (const [key, name, color] of /** @type {Array<["tail" | "collapse", string, string]>} */ ([["tail", "tail fit from window start", FIT_INK], ["collapse", "collapse from window start", ACCENT]])) {
    const pts = input.scan.filter((p) => p[key] !== null);
    traces.push({
      type: "scatter",
      mode: "markers",
      name,
      x: pts.map((p) => p.t_start),
      y: pts.map((p) => (p[key] ?? [0])[0]),
      error_y: { type: "data", array: pts.map((p) => (p[key] ?? [0, 0])[1]), visible: true, color },
      marker: { color, size: 8, symbol: key === "tail" ? "square" : "diamond" },
    });
  }
  const layout = baseLayout(el, timeTitle(input.unit), "z", { xType: "log" });
  layout.showlegend = true;
  // Late points of z_eff are noisy and their band is wide: the axis shows
  // 0 to a little above the highest reference line (or the values, if
  // those stay higher), so the band cannot squash the lines.
  const refTop = Math.max(2, ...input.references.map(([, v]) => v));
  const settled = input.z_eff.filter((p) => p.err === null || p.err < 0.5).map((p) => p.z);
  const top = Math.min(Math.max(refTop + 0.5, ...settled.map((v) => v + 0.3)), 2 * refTop + 1);
  layout.yaxis = { ...(/** @type {PlotObject} */ (layout.yaxis)), range: [0, top] };
  layout.shapes = input.references.map(([, v]) => ({ type: "line", xref: "paper", x0: 0, x1: 1, y0: v, y1: v, line: { color: THEORY_INK, width: 1.5, dash: "dot" } }));
  // Labels alternate between the left and right ends so that close lines
  // (z = 1 and 2α − 1 near α = 1) do not print over each other.
  const byValue = [...input.references].sort((a, b) => a[1] - b[1]);
  layout.annotations = byValue.map(([label, v], k) => ({
    xref: "paper",
    x: k % 2 === 0 ? 0 : 1,
    xanchor: k % 2 === 0 ? "left" : "right",
    y: v,
    yanchor: "bottom",
    text: plain(label),
    showarrow: false,
    font: { color: THEORY_INK, size: fs(12) },
  }));
  return Plotly.react(el, traces, layout, config());
}

// ---- i11-data: figure files with their title and provenance ----

/**
 * Downloads a drawn figure as PNG or SVG with a title and a provenance line
 * written into the image, so a saved file says what it shows and where it
 * came from. The figure on screen is left as it is.
 * @param {HTMLElement} el
 * @param {"png" | "svg"} format
 * @param {string} filename without extension
 * @param {string} title
 * @param {string} provenance
 * @returns {Promise<unknown>}
 */
export function downloadFigureWithProvenance(el, format, filename, title, provenance) {
  if (!el.classList.contains("js-plotly-plot")) return Promise.reject(new Error("this figure is not drawn"));
  const gd = /** @type {any} */ (el);
  const base = gd.layout ?? {};
  const margin = { ...(base.margin ?? {}) };
  margin.t = Math.max(Number(margin.t ?? 0), 60);
  margin.b = Math.max(Number(margin.b ?? 0), 100);
  const note = { text: provenance, xref: "paper", yref: "paper", x: 0, y: 0, xanchor: "left", yanchor: "top", yshift: -70, showarrow: false, font: { size: 11 } };
  const layout = { ...base, title: { text: title }, margin, annotations: [...(base.annotations ?? []), note] };
  const figure = { data: gd.data ?? [], layout };
  return Plotly.downloadImage(/** @type {any} */ (figure), {
    format,
    filename,
    width: Math.max(400, el.clientWidth),
    height: Math.max(300, el.clientHeight) + 60,
    scale: format === "png" ? 2 : 1,
  });
}
