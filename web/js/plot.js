// The figures of the data views; with plotcore.js (the shared look),
// plotcollapse.js (the collapse) and plotpanels.js (comparison, shots,
// couplings) the only modules that touch the vendored plotting library (the
// global `Plotly` from web/vendor/plotly). It turns arrays the server sent into the
// figures of the dashboard and owns their look: fonts sized for a projector
// (larger still in large-text mode), the colour ramps of palette.js, axis
// titles that carry units, the shaded fit windows, overlays of fits and
// theory, the figure downloads and the drag-to-choose-a-window hook.
// It computes no physics: the only arithmetic here is rescaling for display
// (log10 of |C| with a floor for the log colour map; u = x / t^{1/z} and
// y = t^{1/z} C in the collapse; the reference line z = min(2α − 1, 2);
// the power law J / r^α through the coupling fit, from the server's J and α).

import { formatNumber } from "./format.js";
import {
  divergingColourScale,
  mapColourScale,
  orderedSeriesColours,
} from "./palette.js";
import {
  INK,
  GRID,
  ACCENT,
  DATA_INK,
  FIT_INK,
  THEORY_INK,
  fs,
  FONT_FAMILY,
  SYMBOLS,
  plottingAvailable,
  logTicks,
  baseLayout,
  config,
  plain,
  timeTitle,
  band,
  timeWindowShapes,
  spaceWindowShapes,
} from "./plotcore.js";
/** @typedef {import("./plotcore.js").PlotObject} PlotObject */
/** @typedef {import("./plotcore.js").WindowMarks} WindowMarks */


export { loadPlotting, plottingAvailable, setTextScale } from "./plotcore.js";
export { CollapseFigure } from "./plotcollapse.js";
export { drawComparison, drawCouplingDecay, drawCouplingMatrix, drawSiteMap, drawSiteSumRule } from "./plotpanels.js";

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
    ticklabeloverflow: "allow",
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
  // Margins that already hold the time labels, the colour bar and its labels
  // at every lettering size: plotly then finds nothing to push and skips the
  // second layout pass its automatic margins would cost (a good share of
  // the first figure's drawing). Automatic margins stay on for labels
  // wider than these.
  layout.margin = { l: fs(58) + 18, r: fs(100) + 24, t: 20, b: fs(56) + 14 };
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
 * @returns {Promise<void>} settles when the plot has been redrawn
 */
export function fitToContainer(el) {
  if (plottingAvailable() && el.classList.contains("js-plotly-plot")) {
    return Promise.resolve(Plotly.Plots.resize(el)).then(() => undefined);
  }
  return Promise.resolve();
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
    // The margins grow with the lettering, so that in presentation mode with
    // large text the title and tick labels do not eat the plot area.
    margin: { l: fs(44), r: fs(10), t: fs(28), b: fs(26) },
    showlegend: false,
    title: { text: "quality S(z) — lower is better", font: { size: fs(13) }, x: 0.02, xanchor: "left", y: 1, yanchor: "top", pad: { t: fs(6) } },
    xaxis: { ...small, title: { text: "" } },
    yaxis: { ...small, ...(spread > 30 ? { type: "log", ...logTicks(100) } : { type: "linear", nticks: 4 }) },
    shapes,
  };
  return Plotly.react(el, traces, layout, { displayModeBar: false, responsive: true, staticPlot: false }).then(fitIfStale);
}

/**
 * Plotly measures its container only when a figure is first drawn or the
 * window resizes; a redraw after the container changed size (presentation
 * mode, large text, the side panel) would keep the old size and squeeze the
 * plot into a corner of its box. This refits such a figure once.
 * @param {HTMLElement} el a drawn figure
 * @returns {Promise<HTMLElement>}
 */
function fitIfStale(el) {
  const drawn = /** @type {{_fullLayout?: {width?: number, height?: number}}} */ (/** @type {unknown} */ (el))._fullLayout;
  // Plotly sizes a figure to its container's border box.
  const stale = drawn !== undefined && el.offsetWidth > 0 && (Math.abs((drawn.width ?? 0) - el.offsetWidth) > 1 || Math.abs((drawn.height ?? 0) - el.offsetHeight) > 1);
  return stale ? fitToContainer(el).then(() => el) : Promise.resolve(el);
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
      ticklabeloverflow: "allow",
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
