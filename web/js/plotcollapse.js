// The scaling-collapse figure: slices rescaled by t^{1/z}, banded by time,
// the model scaling function over them, rescaled in place as the slider
// moves (see CollapseFigure).

import { formatNumber } from "./format.js";
import {
  timeColour,
  timeColourScale,
} from "./palette.js";
import {
  INK,
  fs,
  baseLayout,
  config,
  plain,
  timeTitle,
} from "./plotcore.js";
/** @typedef {import("./plotcore.js").PlotObject} PlotObject */
/** @typedef {import("./plotcore.js").WindowMarks} WindowMarks */


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
/** How long z must rest before a dragged figure is drawn by plotly again, ms. */
const SETTLE_MS = 180;
/**
 * While dragging, the ranges are refitted when the data leave them or fill
 * less than this share of them; a refit leaves this much room on each side.
 */
const LIVE_FILL = 0.55;
const LIVE_SLACK = 0.12;

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
 *
 * While the slider is dragged (`setZ(z, {live: true})`) even that is too
 * slow: every `Plotly.react` with new data is a full replot (defaults, calc,
 * axes, colour bar, legend, every trace), 40–60 ms on a shared 2-core
 * machine. So a drag draws the same rescaled slices, in the same colours,
 * on a canvas laid over plotly's plot area, and asks plotly only for new
 * axis ranges, and only when the data leave the shown ranges or shrink to
 * well inside them (`Plotly.relayout` of ranges alone skips defaults and
 * calc). Once z rests for SETTLE_MS the canvas is cleared and the figure is
 * drawn by plotly again, with hovering, tight ranges and the model trace;
 * an export always sees that figure.
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
    /** Whether a drag is being drawn on the canvas (see the class notes). */
    this.live = false;
    /** @type {HTMLCanvasElement | null} */
    this.canvas = null;
    this.settleTimer = 0;
    /** Relayouts of our own in progress (their events are not a zoom). */
    this.ownRelayout = 0;
    /** Whether a model curve is set. */
    this.hasModel = false;
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
          ticklabeloverflow: "allow",
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
   * Rescales every slice for exponent `z` and redraws: with plotly, or,
   * with `live` (the slider is being dragged), on the canvas.
   * @param {number} z
   * @param {{live?: boolean}} [options]
   * @returns {Promise<HTMLElement>}
   */
  setZ(z, options = {}) {
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
    return options.live ? this.drawLive() : this.settle();
  }

  /**
   * Draws the rescaled slices on the canvas during a drag, refitting the
   * axis ranges only when needed, and schedules the plotly figure for when z
   * rests.
   * @returns {Promise<HTMLElement>}
   */
  async drawLive() {
    window.clearTimeout(this.settleTimer);
    this.settleTimer = window.setTimeout(() => {
      this.settle().catch(() => undefined);
    }, SETTLE_MS);
    if (!this.live) {
      // The slices and the model leave plotly's figure for the canvas.
      this.live = true;
      await this.react();
    }
    const drawn = /** @type {{layout?: Record<string, any>}} */ (/** @type {unknown} */ (this.el)).layout;
    const shown = { x: drawn?.xaxis?.range, y: drawn?.yaxis?.range };
    if (!this.userRange) {
      const want = this.ranges();
      /** @type {Record<string, [number, number]>} */
      const update = {};
      for (const axis of /** @type {Array<"x" | "y">} */ (["x", "y"])) {
        const now = shown[axis];
        const [lo, hi] = want[axis];
        const fits = Array.isArray(now) && lo >= now[0] && hi <= now[1] && hi - lo >= LIVE_FILL * (now[1] - now[0]);
        if (!fits) {
          const room = LIVE_SLACK * (hi - lo);
          update[`${axis}axis.range`] = [lo - room, hi + room];
        }
      }
      if (Object.keys(update).length > 0) {
        const xa = /** @type {PlotObject} */ (this.layout.xaxis);
        const ya = /** @type {PlotObject} */ (this.layout.yaxis);
        if (update["xaxis.range"]) xa.range = update["xaxis.range"];
        if (update["yaxis.range"]) ya.range = update["yaxis.range"];
        // Not the person's zoom: the relayout hook must not take it for one.
        this.ownRelayout += 1;
        try {
          await Plotly.relayout(this.el, update);
        } finally {
          this.ownRelayout -= 1;
        }
      }
    }
    // A settle or a new figure may have come while waiting.
    if (this.live) this.paint();
    return this.el;
  }

  /**
   * Paints the slices and the model curve on a canvas over the plot area,
   * with plotly's current axis ranges; false when the figure is not drawn.
   * @returns {boolean}
   */
  paint() {
    const gd = /** @type {any} */ (this.el);
    const size = gd._fullLayout?._size;
    const xr = gd.layout?.xaxis?.range;
    const yr = gd.layout?.yaxis?.range;
    const holder = this.el.querySelector(".svg-container");
    if (!size || !Array.isArray(xr) || !Array.isArray(yr) || !(holder instanceof HTMLElement)) return false;
    let canvas = this.canvas;
    if (canvas === null || canvas.parentElement !== holder) {
      canvas = document.createElement("canvas");
      canvas.className = "collapse-live";
      canvas.setAttribute("aria-hidden", "true");
      canvas.style.position = "absolute";
      canvas.style.pointerEvents = "none";
      // Above the paper and the traces, below plotly's top layer (hover, legend of the settled figure).
      holder.insertBefore(canvas, holder.children[1] ?? null);
      this.canvas = canvas;
    }
    const ratio = window.devicePixelRatio || 1;
    const w = Math.max(1, Math.round(size.w));
    const h = Math.max(1, Math.round(size.h));
    canvas.style.left = `${size.l}px`;
    canvas.style.top = `${size.t}px`;
    canvas.style.width = `${w}px`;
    canvas.style.height = `${h}px`;
    if (canvas.width !== Math.round(w * ratio) || canvas.height !== Math.round(h * ratio)) {
      canvas.width = Math.round(w * ratio);
      canvas.height = Math.round(h * ratio);
    }
    canvas.hidden = false;
    const ctx = canvas.getContext("2d");
    if (ctx === null) return false;
    ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
    ctx.clearRect(0, 0, w, h);
    const logY = this.yScale === "log";
    const [x0, x1] = [Number(xr[0]), Number(xr[1])];
    const [y0, y1] = [Number(yr[0]), Number(yr[1])];
    const sx = w / (x1 - x0);
    const sy = h / (y1 - y0);
    const below = y0 - (y1 - y0);
    /**
     * @param {ArrayLike<number>} us
     * @param {ArrayLike<number>} ys
     */
    const trace = (us, ys) => {
      ctx.beginPath();
      let pen = false;
      for (let k = 0; k < us.length; k += 1) {
        const u = us[k] ?? Number.NaN;
        const raw = ys[k] ?? Number.NaN;
        // As plotly draws them, values ≤ 0 on a log axis drop below its foot.
        const v = logY ? (raw > 0 ? Math.log10(raw) : raw === raw ? below : Number.NaN) : raw;
        if (!(u === u) || !(v === v)) {
          pen = false;
          continue;
        }
        const px = (u - x0) * sx;
        const py = h - (v - y0) * sy;
        if (pen) ctx.lineTo(px, py);
        else ctx.moveTo(px, py);
        pen = true;
      }
      ctx.stroke();
    };
    ctx.lineJoin = "round";
    ctx.lineWidth = 2;
    for (let b = 0; b < this.u.length; b += 1) {
      const line = /** @type {{color?: string} | undefined} */ ((/** @type {PlotObject | undefined} */ (this.traces[b]))?.line);
      ctx.strokeStyle = line?.color ?? INK;
      trace(/** @type {Float64Array} */ (this.u[b]), /** @type {Float64Array} */ (this.y[b]));
    }
    if (this.hasModel && Array.isArray(this.model.x) && Array.isArray(this.model.y)) {
      ctx.lineWidth = 4;
      ctx.strokeStyle = INK;
      trace(/** @type {number[]} */ (this.model.x), /** @type {number[]} */ (this.model.y));
    }
    return true;
  }

  /**
   * Sets the model's scaling function (drawn with the next redraw), or removes it.
   * @param {{u: number[], f: number[], label: string} | null} curve
   */
  setModel(curve) {
    this.hasModel = curve !== null;
    if (curve === null) {
      this.model.visible = false;
      this.model.x = [];
      this.model.y = [];
    } else {
      this.model.visible = !this.live;
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

  /**
   * Draws the whole figure with plotly (the slices back from the canvas,
   * tight ranges); during a drag, only repaints the canvas.
   * @returns {Promise<HTMLElement>}
   */
  redraw() {
    if (this.live && this.settleTimer !== 0 && this.paint()) return Promise.resolve(this.el);
    return this.settle();
  }

  /**
   * Forgets a drag in progress without drawing: the figure is being replaced
   * (another dataset, window or y axis), and a late redraw of this one would
   * overwrite the new figure.
   */
  dispose() {
    window.clearTimeout(this.settleTimer);
    this.settleTimer = 0;
    this.live = false;
    this.canvas?.remove();
    this.canvas = null;
  }

  /**
   * Ends a drag, if one is drawn, and draws the whole figure with plotly.
   * @returns {Promise<HTMLElement>}
   */
  settle() {
    window.clearTimeout(this.settleTimer);
    this.settleTimer = 0;
    this.live = false;
    if (this.canvas !== null) this.canvas.hidden = true;
    return this.react();
  }

  /**
   * One `Plotly.react` of the figure as it stands; in a drag the slices and
   * the model are hidden (the canvas draws them).
   * @returns {Promise<HTMLElement>}
   */
  react() {
    for (let b = 0; b < this.u.length; b += 1) {
      const tr = this.traces[b];
      if (tr) tr.visible = !this.live;
    }
    this.model.visible = this.hasModel && !this.live;
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
          if (!ev || typeof ev !== "object" || this.ownRelayout > 0) return;
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

