// The four views of the chosen dataset (space–time map, time slices,
// autocorrelation, sum rule): the tab strip, the one-or-all-four layout, the
// per-view controls, and handing the server's arrays to plot.js. Every number
// drawn comes from the DatasetDetail the server sent; this module only picks
// rows and passes display choices along.

import { byId, h } from "./dom.js";
import { formatNumber } from "./format.js";
import {
  clearPlot,
  drawAutocorrelation,
  drawMap,
  drawSlices,
  drawSumRule,
  fitToContainer,
} from "./plot.js";

/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */
/** @typedef {"map" | "slices" | "auto" | "sum"} ViewName */

const VIEW_NAMES = /** @type {const} */ (["map", "slices", "auto", "sum"]);

/** How many slices "Spread 5" and a fresh dataset show. */
const DEFAULT_SLICES = 5;

/** What the person chose, kept across reloads of the same dataset. */
const state = {
  /** @type {DatasetDetail | null} */
  detail: null,
  /** The log scale shows the whole spreading front at once, so it is the default. @type {"linear" | "log"} */
  mapScale: "log",
  floor: 1e-3,
  /** Time axis of the map and the sum rule; chosen per dataset, see timeAxisFor. @type {"linear" | "log"} */
  timeAxis: "linear",
  /** @type {"linear" | "log"} */
  sliceY: "linear",
  /** Indices into detail.t of the slices shown. @type {number[]} */
  sliceIdx: [],
  /** @type {ViewName} */
  active: "map",
  /** Whether all four views are shown at once. */
  grid: false,
};

/**
 * @param {ViewName} view
 * @returns {HTMLElement}
 */
function plotEl(view) {
  return byId(`view-${view}`, HTMLElement);
}

/**
 * Replaces a plot by a sentence saying why it is empty, or clears the sentence.
 * @param {ViewName} view
 * @param {string | null} message
 */
function note(view, message) {
  const el = byId(`note-${view}`, HTMLElement);
  el.textContent = message ?? "";
  el.hidden = message === null;
  if (message !== null) clearPlot(plotEl(view));
}

/**
 * Evenly spread indices of times, preferring t > 0: the t = 0 slice is the
 * initial spike and would flatten every later profile on a linear axis.
 * @param {number[]} t
 * @param {number} count
 * @returns {number[]}
 */
export function spreadIndices(t, count) {
  const candidates = t.map((_, i) => i).filter((i) => (t[i] ?? 0) > 0);
  const pool = candidates.length > 0 ? candidates : t.map((_, i) => i);
  if (pool.length <= count) return pool;
  /** @type {number[]} */
  const picked = [];
  for (let k = 0; k < count; k += 1) {
    const i = pool[Math.round((k * (pool.length - 1)) / (count - 1))];
    if (i !== undefined && !picked.includes(i)) picked.push(i);
  }
  return picked;
}

/**
 * The time axis a dataset reads best on: logarithmic when its positive times
 * grow by a roughly constant factor (a geometric grid, common for runs that
 * follow a power-law tail), linear otherwise. A display choice only.
 * @param {number[]} t
 * @returns {"linear" | "log"}
 */
export function timeAxisFor(t) {
  const positive = t.filter((v) => v > 0);
  if (positive.length < 4) return "linear";
  /** @type {number[]} */
  const ratios = [];
  for (let i = 1; i < positive.length; i += 1) {
    const a = positive[i - 1] ?? 1;
    const b = positive[i] ?? 1;
    ratios.push(Math.log(b / a));
  }
  const mean = ratios.reduce((sum, r) => sum + r, 0) / ratios.length;
  if (!(mean > Math.log(1.05))) return "linear";
  const spread = Math.sqrt(ratios.reduce((sum, r) => sum + (r - mean) ** 2, 0) / ratios.length);
  return spread < 0.25 * mean ? "log" : "linear";
}

/**
 * Rows of the map that a time axis can show: a log axis has no place for
 * t ≤ 0, so those rows are left out (and the caption says so).
 * @param {DatasetDetail} d
 * @returns {number[]} row indices
 */
function drawableRows(d) {
  const all = d.t.map((_, i) => i);
  return state.timeAxis === "log" ? all.filter((i) => (d.t[i] ?? 0) > 0) : all;
}

/**
 * @param {ViewName} view
 * @param {number} left rows or points left out by the log time axis
 * @param {string} what "row" or "point"
 */
function timeCaption(view, left, what) {
  byId(`caption-${view}`, HTMLElement).textContent =
    left === 0 ? "" : `${left} ${what}${left === 1 ? "" : "s"} at t ≤ 0 not shown on the log time axis.`;
}

/**
 * Zoom and pan are kept across redraws of the same dataset with the same axis
 * types, and reset when either changes.
 * @param {DatasetDetail} d
 * @param {string} axes
 * @returns {string}
 */
function revision(d, axes) {
  return `${d.id}|${d.content_hash}|${axes}`;
}

/**
 * Reports a drawing failure where the plot would be.
 * @param {ViewName} view
 * @param {unknown} error
 */
function drawFailed(view, error) {
  note(view, `This view could not be drawn: ${error instanceof Error ? error.message : String(error)}`);
}

function drawMapView() {
  const d = state.detail;
  if (d === null) return;
  if (d.x.length === 0 || d.t.length === 0) {
    note("map", "The dataset has no grid points.");
    return;
  }
  const rows = drawableRows(d);
  timeCaption("map", d.t.length - rows.length, "row");
  if (rows.length === 0) {
    note("map", "No time above 0 to show on a log time axis; switch the time axis to linear.");
    return;
  }
  note("map", null);
  drawMap(plotEl("map"), {
    x: d.x,
    t: rows.map((i) => d.t[i] ?? Number.NaN),
    C: rows.map((i) => d.C[i] ?? []),
    timeUnit: d.meta.time_unit,
    scale: state.mapScale,
    floor: state.floor,
    tScale: state.timeAxis,
    revision: revision(d, state.timeAxis),
  }).catch((e) => drawFailed("map", e));
}

function drawSlicesView() {
  const d = state.detail;
  if (d === null) return;
  if (state.sliceIdx.length === 0) {
    note("slices", "Choose one or more times above to draw C(x) at those times.");
    return;
  }
  note("slices", null);
  const series = [...state.sliceIdx]
    .sort((a, b) => a - b)
    .map((i) => ({
      t: d.t[i] ?? Number.NaN,
      C: d.C[i] ?? [],
      err: d.err ? (d.err[i] ?? null) : null,
    }));
  drawSlices(plotEl("slices"), {
    x: d.x,
    series,
    timeUnit: d.meta.time_unit,
    yScale: state.sliceY,
    revision: revision(d, state.sliceY),
  }).catch((e) => drawFailed("slices", e));
}

function drawAutoView() {
  const d = state.detail;
  if (d === null) return;
  const all = d.autocorrelation ?? [];
  // Log–log axes cannot show t ≤ 0 or C ≤ 0; leave those points out and say so.
  const points = all.filter((p) => p.t > 0 && p.C > 0);
  const left = all.length - points.length;
  byId("caption-auto", HTMLElement).textContent =
    left === 0 ? "" : `${left} point${left === 1 ? "" : "s"} with t ≤ 0 or C ≤ 0 not shown.`;
  if (all.length === 0) {
    note("auto", "No autocorrelation: the dataset has no x = 0 column.");
    return;
  }
  if (points.length === 0) {
    note("auto", "Every autocorrelation value is at t ≤ 0 or not positive, so none can be shown on log–log axes.");
    return;
  }
  note("auto", null);
  drawAutocorrelation(plotEl("auto"), {
    points,
    timeUnit: d.meta.time_unit,
    revision: revision(d, "log"),
  }).catch((e) => drawFailed("auto", e));
}

function drawSumView() {
  const d = state.detail;
  if (d === null) return;
  if (d.sum_rule.length === 0) {
    note("sum", "The server reported no sum-rule values for this dataset.");
    return;
  }
  const shown = state.timeAxis === "log" ? d.sum_rule.filter((p) => p.t > 0) : d.sum_rule;
  timeCaption("sum", d.sum_rule.length - shown.length, "point");
  if (shown.length === 0) {
    note("sum", "No time above 0 to show on a log time axis; switch the time axis to linear.");
    return;
  }
  note("sum", null);
  const points = shown.map((p) => ({
    t: p.t,
    sum: p.sum,
    err: p.err,
    present: p.present,
    // `present` is either a flag (every site present at this time) or a
    // count of present sites; a count below the number of sites is incomplete.
    complete: typeof p.present === "number" ? p.present >= d.sites : p.present !== false,
  }));
  drawSumRule(plotEl("sum"), {
    points,
    timeUnit: d.meta.time_unit,
    tScale: state.timeAxis,
    revision: revision(d, state.timeAxis),
  }).catch((e) =>
    drawFailed("sum", e),
  );
}

/** @type {Record<ViewName, () => void>} */
const DRAW = {
  map: drawMapView,
  slices: drawSlicesView,
  auto: drawAutoView,
  sum: drawSumView,
};

/** Fills the time multi-select from the dataset's times. */
function fillTimeOptions() {
  const select = byId("slice-times", HTMLSelectElement);
  const d = state.detail;
  if (d === null) {
    select.replaceChildren();
    return;
  }
  const unit = d.meta.time_unit ? ` ${d.meta.time_unit}` : "";
  const chosen = new Set(state.sliceIdx);
  select.replaceChildren(
    ...d.t.map((t, i) => {
      const option = h("option", { value: String(i) }, [`t = ${formatNumber(t)}${unit}`]);
      option.selected = chosen.has(i);
      return option;
    }),
  );
  select.size = Math.min(4, Math.max(2, d.t.length));
}

/**
 * Shows a dataset in all four views. Display choices survive when the same
 * dataset comes back (for example after its metadata changed).
 * @param {DatasetDetail} detail
 */
export function showDataset(detail) {
  const same = state.detail !== null && String(state.detail.id) === String(detail.id) && state.detail.t.length === detail.t.length;
  state.detail = detail;
  if (!same) {
    state.sliceIdx = spreadIndices(detail.t, DEFAULT_SLICES);
    state.timeAxis = timeAxisFor(detail.t);
    syncTimeAxisRadios();
  }
  fillTimeOptions();
  for (const view of VIEW_NAMES) DRAW[view]();
}

/**
 * Empties every view (no dataset to show) and says why in each.
 * @param {string} message
 */
export function showNothing(message) {
  state.detail = null;
  fillTimeOptions();
  for (const view of VIEW_NAMES) note(view, message);
}

/**
 * @param {ViewName} view
 * @param {{focus?: boolean}} [options]
 */
function activate(view, options = {}) {
  state.active = view;
  for (const name of VIEW_NAMES) {
    const tab = byId(`tab-${name}`, HTMLButtonElement);
    const on = name === view;
    tab.setAttribute("aria-selected", on ? "true" : "false");
    tab.tabIndex = on ? 0 : -1;
    byId(`panel-${name}`, HTMLElement).classList.toggle("is-active", on);
    if (on && options.focus) tab.focus();
  }
  fitToContainer(plotEl(view));
}

/** Shows the current time-axis choice in both of its radio groups. */
function syncTimeAxisRadios() {
  for (const group of ["map-t", "sum-t"]) {
    for (const radio of document.querySelectorAll(`input[name="${group}"]`)) {
      if (radio instanceof HTMLInputElement) radio.checked = radio.value === state.timeAxis;
    }
  }
}

/** Wires tabs, the layout toggle and every view control. */
export function wireViews() {
  const tabs = VIEW_NAMES.map((name) => byId(`tab-${name}`, HTMLButtonElement));
  tabs.forEach((tab, i) => {
    tab.addEventListener("click", () => activate(VIEW_NAMES[i] ?? "map"));
    tab.addEventListener("keydown", (ev) => {
      /** @type {number | null} */
      let next = null;
      if (ev.key === "ArrowRight") next = (i + 1) % tabs.length;
      else if (ev.key === "ArrowLeft") next = (i - 1 + tabs.length) % tabs.length;
      else if (ev.key === "Home") next = 0;
      else if (ev.key === "End") next = tabs.length - 1;
      if (next !== null) {
        ev.preventDefault();
        activate(VIEW_NAMES[next] ?? "map", { focus: true });
      }
    });
  });

  const views = byId("views", HTMLElement);
  const toggle = byId("layout-toggle", HTMLButtonElement);
  toggle.addEventListener("click", () => {
    state.grid = !state.grid;
    views.classList.toggle("is-grid", state.grid);
    document.body.classList.toggle("views-grid", state.grid);
    toggle.setAttribute("aria-pressed", state.grid ? "true" : "false");
    toggle.textContent = state.grid ? "Show one view" : "Show all four";
    // The panels change size with the layout; let the browser lay them out
    // first, then redraw, since legend placement and tick density follow size.
    window.requestAnimationFrame(() => {
      for (const view of VIEW_NAMES) DRAW[view]();
    });
  });

  const floor = byId("map-floor", HTMLSelectElement);
  for (const radio of document.querySelectorAll('input[name="map-scale"]')) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (!radio.checked) return;
      state.mapScale = radio.value === "log" ? "log" : "linear";
      floor.disabled = state.mapScale !== "log";
      drawMapView();
    });
  }
  floor.addEventListener("change", () => {
    const v = Number(floor.value);
    if (Number.isFinite(v) && v > 0) state.floor = v;
    drawMapView();
  });

  for (const radio of document.querySelectorAll('input[name="map-t"], input[name="sum-t"]')) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (!radio.checked) return;
      state.timeAxis = radio.value === "log" ? "log" : "linear";
      syncTimeAxisRadios();
      drawMapView();
      drawSumView();
    });
  }

  const times = byId("slice-times", HTMLSelectElement);
  times.addEventListener("change", () => {
    state.sliceIdx = Array.from(times.selectedOptions, (o) => Number(o.value));
    drawSlicesView();
  });
  byId("slice-spread", HTMLButtonElement).addEventListener("click", () => {
    if (state.detail === null) return;
    state.sliceIdx = spreadIndices(state.detail.t, DEFAULT_SLICES);
    fillTimeOptions();
    drawSlicesView();
  });
  byId("slice-clear", HTMLButtonElement).addEventListener("click", () => {
    state.sliceIdx = [];
    fillTimeOptions();
    drawSlicesView();
  });
  for (const radio of document.querySelectorAll('input[name="slice-y"]')) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (!radio.checked) return;
      state.sliceY = radio.value === "log" ? "log" : "linear";
      drawSlicesView();
    });
  }
}
