// Shared look of every figure: colours, fonts (scaled in large-text mode),
// axes with units and unambiguous log ticks, the layout and configuration
// every figure starts from, and the shaded fit windows. Knows the vendored
// plotting library only through the global `Plotly`.

export const INK = "#15181d";
export const GRID = "#dedad1";
export const ACCENT = "#a3195b";
export const DATA_INK = "#1f3f8f";
/** Fits drawn over data: a dark green that stays apart from the data's blue and the time ramp. */
export const FIT_INK = "#1d6b4f";
/** Theory drawn over data. */
export const THEORY_INK = "#6b4a00";
export const WINDOW_FILL = "rgba(163, 25, 91, 0.07)";
export const WINDOW_EDGE = "rgba(163, 25, 91, 0.75)";

/** Font scale: 1 normally, larger in large-text mode. */
export let textScale = 1;

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
export function fs(px) {
  return Math.round(px * textScale);
}
export const FONT_FAMILY =
  'system-ui, -apple-system, "Segoe UI", "Noto Sans", "DejaVu Sans", "Liberation Sans", sans-serif';

/** Marker shapes cycled through the time slices so that order never rests on colour alone. */
export const SYMBOLS = ["circle", "square", "diamond", "triangle-up", "triangle-down", "pentagon", "hexagon", "star", "cross", "x"];

/** @typedef {Record<string, unknown>} PlotObject */

/**
 * @returns {boolean} whether the vendored library has loaded
 */
export function plottingAvailable() {
  return typeof Plotly !== "undefined";
}

/** The vendored plotting library, next to this module's folder. */
const LIBRARY = new URL("../vendor/plotly/plotly-scatter-heatmap.min.js", import.meta.url).href;

/** @type {Promise<void> | null} */
let loading = null;

/**
 * Loads the vendored plotting library once, as an ordinary script added to
 * the page (the page's head preloads the file). The page asks for its data
 * first and only then waits for this: evaluating the library is the longest
 * single piece of a first load, and the requests run meanwhile.
 * @returns {Promise<void>} settles when `Plotly` is defined, or fails
 */
export function loadPlotting() {
  if (loading !== null) return loading;
  loading = new Promise((resolve, reject) => {
    if (plottingAvailable()) {
      resolve();
      return;
    }
    const script = document.createElement("script");
    script.src = LIBRARY;
    script.addEventListener("load", () => (plottingAvailable() ? resolve() : reject(new Error("the plotting library ran but defined nothing"))));
    script.addEventListener("error", () => reject(new Error("the plotting library could not be loaded")));
    document.head.append(script);
  });
  return loading;
}

/**
 * An axis in the house style.
 * @param {string} title axis title including its unit
 * @param {"linear" | "log"} type
 * @param {number} lengthPx room the axis has on screen, in CSS pixels
 * @returns {PlotObject}
 */
export function axis(title, type, lengthPx) {
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
    // Plotly's default ("hide past div") measures every tick label again
    // for each label drawn, which made a third of each collapse redraw; the
    // margins here already hold the labels.
    ticklabeloverflow: "allow",
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
export function logTicks(lengthPx) {
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

export const SUPERSCRIPT = /** @type {Record<string, string>} */ ({ "-": "⁻", 0: "⁰", 1: "¹", 2: "²", 3: "³", 4: "⁴", 5: "⁵", 6: "⁶", 7: "⁷", 8: "⁸", 9: "⁹" });

/**
 * @param {number} mantissa 1 … 9
 * @param {number} exp power of ten
 * @returns {string} "0.02", "500" or "2×10⁻⁵"
 */
export function logTickText(mantissa, exp) {
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
export function baseLayout(el, xTitle, yTitle, types = {}) {
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
export function config() {
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
export function plain(text) {
  return text.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;").replace(/%\{/g, "%\u200b{");
}

/**
 * @param {string} unit time unit from the dataset's metadata, possibly empty
 * @returns {string} axis title for time
 */
export function timeTitle(unit) {
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
export function band(along, from, to, edges) {
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
export function timeWindowShapes(along, w, lo, hi) {
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
export function spaceWindowShapes(w) {
  if (!w || w.x_max === null || w.x_max === undefined) return [];
  return band("x", -w.x_max, w.x_max, { from: true, to: true });
}

