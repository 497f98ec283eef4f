// The views of the chosen dataset: the tab strip, the one-or-four layout,
// the controls of the four data views (space–time map, time slices,
// autocorrelation, sum rule), the overlays drawn on them (fitted curves and
// theory), the fit windows shaded on them and chosen by dragging across
// them, and the figure downloads. The collapse, residual and cross-run views
// register themselves here and draw their own figures. Every number drawn
// comes from the server; this module only picks rows and passes display
// choices along.

import { emit, on } from "./bus.js";
import { byId, h } from "./dom.js";
import { methodName, parameterValue } from "./fitformat.js";
import { formatNumber } from "./format.js";
import {
  clearPlot,
  downloadFigureWithProvenance,
  drawAutocorrelation,
  drawLocalExponent,
  drawMap,
  drawSlices,
  drawSumRule,
  fitToContainer,
  isDrawn,
  onRangeSelect,
} from "./plot.js";
import { writeViewState } from "./urlstate.js";
import { getWindows, setWindows } from "./windows.js";

/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */
/** @typedef {import("./api.js").FitResult} FitResult */
/** @typedef {import("./api.js").TheoryResult} TheoryResult */
/** @typedef {"map" | "slices" | "auto" | "sum" | "collapse" | "residual" | "compare" | "sites" | "couplings"} ViewName */
/** @typedef {import("./plot.js").SliceOverlay} SliceOverlay */
/** @typedef {import("./plot.js").LineOverlay} LineOverlay */

export const VIEW_NAMES = /** @type {const} */ (["map", "slices", "auto", "sum", "collapse", "residual", "compare", "sites", "couplings"]);
/** The views drawn by this module (the others register themselves). */
const GRID_VIEWS = /** @type {const} */ (["map", "slices", "auto", "sum"]);
/** @typedef {typeof GRID_VIEWS[number]} DataView */
/** Views that may share the screen in the panel grid, in the order they are laid out. */
export const PANEL_CHOICES = /** @type {const} */ (["map", "slices", "auto", "sum", "collapse", "residual"]);

/** How many slices "Spread 5" and a fresh dataset show. */
const DEFAULT_SLICES = 5;

/**
 * A view drawn by another module.
 * @typedef {object} RegisteredView
 * @property {() => void} shown called when the view becomes visible or its size changes
 * @property {() => HTMLElement[]} figures the drawn figures, for downloads
 */

/** @type {Partial<Record<ViewName, RegisteredView>>} */
const registered = {};

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
  /** Whether several views are shown at once, in a grid. */
  grid: false,
  /** The views the grid shows, chosen by the person. @type {ViewName[]} */
  gridViews: /** @type {ViewName[]} */ (["map", "slices", "auto", "sum"]),
  /** What a drag does on the autocorrelation and the slices. @type {"select" | "zoom"} */
  dragAuto: "select",
  /** @type {"select" | "zoom"} */
  dragSlices: "select",
  /** The latest fit of the chosen dataset with a curve for each view. @type {{tail: LineOverlay | null, profile: SliceOverlay | null}} */
  fitOverlay: { tail: null, profile: null },
  /** @type {TheoryResult | null} */
  theory: null,
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
export function note(view, message) {
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

/** @returns {"linear" | "log"} the time axis chosen for the map and the sum rule */
export function currentTimeAxis() {
  return state.timeAxis;
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
export function revision(d, axes) {
  return `${d.id}|${d.content_hash}|${axes}`;
}

/**
 * Reports a drawing failure where the plot would be.
 * @param {ViewName} view
 * @param {unknown} error
 */
export function drawFailed(view, error) {
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
    windows: getWindows(),
  }).catch((e) => drawFailed("map", e));
}

/**
 * The overlays of the slice view: the latest fitted profile and the theory.
 * @param {DatasetDetail} d
 * @returns {SliceOverlay[]}
 */
function sliceOverlays(d) {
  /** @type {SliceOverlay[]} */
  const out = [];
  if (state.fitOverlay.profile) out.push(state.fitOverlay.profile);
  const th = state.theory;
  if (th) {
    out.push({
      label: `${theoryName(th.model)} (dashed)`,
      kind: "theory",
      x: th.x,
      curves: state.sliceIdx.flatMap((i) => {
        const t = d.t[i];
        if (t === undefined) return [];
        const row = th.t.findIndex((tt) => Math.abs(tt - t) <= 1e-9 * Math.max(1, Math.abs(t)));
        const C = row >= 0 ? th.C[row] : undefined;
        return C ? [{ t, C }] : [];
      }),
    });
  }
  return out;
}

/**
 * Words for a theory model's name.
 * @param {string} model
 * @returns {string}
 */
export function theoryName(model) {
  return { lattice_walk: "lattice walk", spin_chain: "spin-chain dynamics", short_time: "short-time expansion" }[model] ?? model;
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
  const overlays = sliceOverlays(d);
  byId("caption-slices", HTMLElement).textContent = overlays.length > 0
    ? `Over the data: ${overlays.map((o) => o.label).join("; ")}.`
    : "";
  drawSlices(plotEl("slices"), {
    x: d.x,
    series,
    timeUnit: d.meta.time_unit,
    yScale: state.sliceY,
    revision: revision(d, state.sliceY),
    overlays,
    windows: getWindows(),
    dragmode: state.dragSlices,
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
  /** @type {LineOverlay[]} */
  const overlays = [];
  if (state.fitOverlay.tail) overlays.push(state.fitOverlay.tail);
  const th = state.theory;
  if (th) {
    const j = th.x.indexOf(0);
    if (j >= 0) overlays.push({ label: theoryName(th.model), kind: "theory", t: th.t, C: th.C.map((row) => row[j] ?? null) });
  }
  drawAutocorrelation(plotEl("auto"), {
    points,
    timeUnit: d.meta.time_unit,
    revision: revision(d, "log"),
    overlays,
    windows: getWindows(),
    dragmode: state.dragAuto,
  }).catch((e) => drawFailed("auto", e));
  drawLocalExponentView();
}

/** The local-exponent picture of each dataset's verdict, by dataset id. @type {Map<string, any>} */
const localExponents = new Map();

/** Draws z_eff(t) under the autocorrelation from the dataset's verdict. */
function drawLocalExponentView() {
  const d = state.detail;
  const el = byId("view-auto-zeff", HTMLElement);
  const noteEl = byId("note-auto-zeff", HTMLElement);
  if (d === null) return;
  const picture = localExponents.get(String(d.id));
  if (!picture || !Array.isArray(picture.z_eff) || picture.z_eff.length === 0) {
    el.hidden = true;
    noteEl.hidden = false;
    noteEl.textContent = picture ? "Too few positive C(0,t) values for a local exponent." : "The local exponent is drawn once the dataset's verdict has been computed.";
    return;
  }
  el.hidden = false;
  noteEl.hidden = true;
  drawLocalExponent(el, { z_eff: picture.z_eff, scan: picture.scan ?? [], references: picture.references ?? [], unit: d.meta.time_unit }).catch(() => {
    el.hidden = true;
    noteEl.hidden = false;
    noteEl.textContent = "The local exponent could not be drawn.";
  });
}

on("verdict", ({ dataset, result }) => {
  const report = /** @type {Record<string, unknown>} */ (result.report ?? {});
  localExponents.set(dataset, report.local_exponent_picture ?? null);
  if (state.detail !== null && String(state.detail.id) === dataset) drawLocalExponentView();
});

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

/** @type {Record<DataView, () => void>} */
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
  select.size = Math.min(3, Math.max(2, d.t.length));
}

/**
 * Shows a dataset in the four data views. Display choices survive when the
 * same dataset comes back (for example after its metadata changed).
 * @param {DatasetDetail} detail
 */
export function showDataset(detail) {
  const same = state.detail !== null && String(state.detail.id) === String(detail.id) && state.detail.t.length === detail.t.length;
  state.detail = detail;
  if (!same) {
    state.sliceIdx = spreadIndices(detail.t, DEFAULT_SLICES);
    state.timeAxis = timeAxisFor(detail.t);
    state.fitOverlay = { tail: null, profile: null };
    state.theory = null;
    syncTimeAxisRadios();
  }
  fillTimeOptions();
  // The views on screen first; the others after the next frame has been
  // painted, so the first figure does not wait for the hidden ones, and one
  // per task, so that a click or a key between them is not kept waiting for
  // all of them (each is a cold plotly drawing on a first load).
  const hidden = GRID_VIEWS.filter((view) => !isVisible(view));
  for (const view of GRID_VIEWS) if (isVisible(view)) DRAW[view]();
  const drawNextHidden = () => {
    const view = hidden.shift();
    if (view === undefined || state.detail !== detail) return;
    DRAW[view]();
    window.setTimeout(drawNextHidden, 0);
  };
  window.requestAnimationFrame(() => window.setTimeout(drawNextHidden, 0));
  emit("dataset", detail);
}

/**
 * Empties every view (no dataset to show) and says why in each.
 * @param {string} message
 */
export function showNothing(message) {
  state.detail = null;
  fillTimeOptions();
  for (const view of VIEW_NAMES) {
    // The comparison and the coupling fit do not belong to one dataset.
    if (view !== "compare" && view !== "couplings") note(view, message);
  }
  emit("dataset", null);
}

/**
 * Lets another module own a view's figure.
 * @param {ViewName} view
 * @param {RegisteredView} handlers
 */
export function registerView(view, handlers) {
  registered[view] = handlers;
}

/** @returns {ViewName} */
export function activeView() {
  return state.active;
}

/**
 * @param {ViewName} view
 * @returns {boolean} whether the view is on screen
 */
export function isVisible(view) {
  if (state.grid) return state.gridViews.includes(view);
  return state.active === view;
}

/** @returns {boolean} whether several views share the screen */
export function gridShown() {
  return state.grid;
}

/**
 * Shows one view. A view outside the grid's chosen set ends that layout.
 * A change made by the person adds a step to the browser's history, so Back
 * returns to the view before; `history: false` is for changes that come
 * from the history itself.
 * @param {ViewName} view
 * @param {{focus?: boolean, history?: boolean}} [options]
 */
export function activate(view, options = {}) {
  const changed = state.active !== view;
  state.active = view;
  if (state.grid && !state.gridViews.includes(view)) setGrid(false);
  for (const name of VIEW_NAMES) {
    const tab = byId(`tab-${name}`, HTMLButtonElement);
    const isOn = name === view;
    tab.setAttribute("aria-selected", isOn ? "true" : "false");
    tab.tabIndex = isOn ? 0 : -1;
    byId(`panel-${name}`, HTMLElement).classList.toggle("is-active", isOn);
    if (isOn && options.focus) tab.focus();
  }
  writeViewState({ view }, { push: changed && options.history !== false });
  if (state.grid) {
    window.requestAnimationFrame(() => redrawAll());
  } else if (view === "map" || view === "slices" || view === "auto" || view === "sum") fitToContainer(plotEl(view));
  else registered[view]?.shown();
  emit("view", view);
}

/** Marks the panels that belong to the grid and sets its columns. */
function layoutGrid() {
  const views = byId("views", HTMLElement);
  const chosen = PANEL_CHOICES.filter((v) => state.gridViews.includes(v));
  for (const name of VIEW_NAMES) {
    byId(`panel-${name}`, HTMLElement).classList.toggle("in-grid", chosen.includes(/** @type {any} */ (name)));
  }
  const n = Math.max(1, chosen.length);
  const columns = n <= 1 ? 1 : n <= 4 ? 2 : 3;
  views.style.setProperty("--grid-columns", String(columns));
  views.style.setProperty("--grid-rows", String(Math.ceil(n / columns)));
  for (const box of document.querySelectorAll("#grid-choices input[type=checkbox]")) {
    if (box instanceof HTMLInputElement) box.checked = state.gridViews.includes(/** @type {ViewName} */ (box.value));
  }
}

/**
 * Shows several views at once, or one.
 * @param {boolean} grid
 */
export function setGrid(grid) {
  state.grid = grid;
  const views = byId("views", HTMLElement);
  const toggle = byId("layout-toggle", HTMLButtonElement);
  layoutGrid();
  views.classList.toggle("is-grid", grid);
  document.body.classList.toggle("views-grid", grid);
  toggle.setAttribute("aria-pressed", grid ? "true" : "false");
  toggle.textContent = grid ? "One view" : "Several views";
  if (grid && !state.gridViews.includes(state.active)) activate(state.gridViews[0] ?? "map", { history: false });
  // The panels change size with the layout; let the browser lay them out
  // first, then redraw, since legend placement and tick density follow size.
  window.requestAnimationFrame(() => redrawAll());
}

/**
 * Chooses the views of the grid (at least one).
 * @param {ViewName[]} views
 */
export function setGridViews(views) {
  const chosen = PANEL_CHOICES.filter((v) => views.includes(v));
  if (chosen.length === 0) return;
  state.gridViews = [...chosen];
  if (state.grid) setGrid(true);
  else layoutGrid();
}

/** Redraws every visible view (after a layout or lettering change). */
export function redrawAll() {
  for (const view of GRID_VIEWS) {
    DRAW[view]();
    // A change of layout (grid, presentation, side panel) resizes the
    // containers; Plotly follows only window resizes by itself.
    const el = plotEl(view);
    if (el.offsetParent !== null) fitToContainer(el);
  }
  if (state.grid) {
    for (const view of state.gridViews) if (!(/** @type {readonly string[]} */ (GRID_VIEWS)).includes(view)) registered[view]?.shown();
  } else registered[state.active]?.shown();
}

/** Shows the current time-axis choice in both of its radio groups. */
function syncTimeAxisRadios() {
  for (const group of ["map-t", "sum-t"]) {
    for (const radio of document.querySelectorAll(`input[name="${group}"]`)) {
      if (radio instanceof HTMLInputElement) radio.checked = radio.value === state.timeAxis;
    }
  }
}

/**
 * Calls back with the value of the chosen radio button of a group.
 * @param {string} name
 * @param {(value: string) => void} callback
 */
function onRadio(name, callback) {
  for (const radio of document.querySelectorAll(`input[name="${name}"]`)) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (radio.checked) callback(radio.value);
    });
  }
}

/**
 * Turns a fit's overlay into curves for the views, when the fit belongs to
 * the dataset shown. The server names them `tail` ({t, C}) and `profile`
 * ({x, t, C}); anything else in the overlay is left to other views.
 * @param {FitResult} fit
 */
function takeFitOverlay(fit) {
  const d = state.detail;
  if (d === null || String(fit.dataset) !== String(d.id)) return;
  const overlay = fit.overlay ?? null;
  const z = fit.parameters.z;
  const tail = overlay ? /** @type {any} */ (overlay).tail : null;
  if (tail && Array.isArray(tail.t) && Array.isArray(tail.C)) {
    state.fitOverlay.tail = {
      label: z ? `${methodName(fit.method)}: z = ${parameterValue(z)}` : methodName(fit.method),
      kind: "fit",
      t: tail.t,
      C: tail.C,
    };
    DRAW.auto();
  }
  const profile = overlay ? /** @type {any} */ (overlay).profile : null;
  if (profile && Array.isArray(profile.x) && Array.isArray(profile.t) && Array.isArray(profile.C)) {
    state.fitOverlay.profile = {
      label: z ? `${methodName(fit.method)}: z = ${parameterValue(z)}` : methodName(fit.method),
      kind: "fit",
      x: profile.x,
      curves: profile.t.map((/** @type {number} */ t, /** @type {number} */ i) => ({ t, C: profile.C[i] ?? [] })),
    };
    DRAW.slices();
  }
}

/**
 * A figure file's name from its content: the session for a cross-run view,
 * else the dataset; the view; the method of the fit drawn on it, if any.
 * @param {ViewName} view
 * @returns {string}
 */
function figureFileName(view) {
  const clean = (/** @type {string} */ text) => text.replace(/[^\p{L}\p{N}._-]+/gu, "-").replace(/^-+|-+$/g, "");
  const crossRun = view === "compare";
  const session = document.getElementById("session-name")?.textContent ?? "session";
  const owner = crossRun || !state.detail ? session : state.detail.name;
  const viewLabel = crossRun ? "across-runs" : view;
  const overlay = view === "auto" ? state.fitOverlay.tail : view === "slices" ? state.fitOverlay.profile : null;
  const method = overlay ? (overlay.label.split(" ")[0] ?? "") : "";
  return ["spreadscope", owner, viewLabel, method].map(clean).filter((p) => p !== "").join("_");
}

/**
 * The title and provenance line written into a saved figure.
 * @param {ViewName} view
 * @returns {{title: string, provenance: string}}
 */
function figureLabels(view) {
  const session = document.getElementById("session-name")?.textContent ?? "session";
  const viewTitle = document.getElementById(`tab-${view}`)?.textContent?.trim() || view;
  const d = view === "compare" ? null : state.detail;
  const title = d ? `${viewTitle} — ${d.name}` : `${viewTitle} — ${session}`;
  const parts = [`spreadscope`, `session “${session}”`];
  if (d) parts.push(`dataset “${d.name}”, data hash ${d.content_hash.slice(0, 12)}`);
  const overlay = view === "auto" ? state.fitOverlay.tail : view === "slices" ? state.fitOverlay.profile : null;
  if (overlay) parts.push(overlay.label);
  parts.push(`saved ${new Date().toISOString().slice(0, 16).replace("T", " ")} UTC`);
  return { title, provenance: parts.join(" · ") };
}

/**
 * Downloads the figures of the active view.
 * @param {"png" | "svg"} format
 */
function saveFigures(format) {
  const view = state.active;
  const figures = view === "map" || view === "slices" || view === "auto" || view === "sum" ? [plotEl(view)] : (registered[view]?.figures() ?? []);
  const drawn = figures.filter(isDrawn);
  const status = byId("copy-status", HTMLElement);
  if (drawn.length === 0) {
    status.textContent = "Nothing drawn in this view to save.";
    return;
  }
  const name = figureFileName(view);
  drawn.forEach((el, i) => {
    const suffix = drawn.length > 1 ? `-${i + 1}` : "";
    const { title, provenance } = figureLabels(view);
    downloadFigureWithProvenance(el, format, `${name}${suffix}`, title, provenance).catch((e) => {
      status.textContent = `Could not save the figure: ${e instanceof Error ? e.message : String(e)}`;
    });
  });
}

/** Wires tabs, the layout toggle, every view control and the drag hooks. */
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
      // A hidden tab (the site-resolved view of a dataset without shots) is stepped over.
      const step = ev.key === "ArrowLeft" || ev.key === "End" ? -1 : 1;
      for (let k = 0; next !== null && tabs[next]?.hidden && k < tabs.length; k += 1) next = (next + step + tabs.length) % tabs.length;
      if (next !== null) {
        ev.preventDefault();
        activate(VIEW_NAMES[next] ?? "map", { focus: true });
      }
    });
  });

  byId("layout-toggle", HTMLButtonElement).addEventListener("click", () => setGrid(!state.grid));
  for (const box of document.querySelectorAll("#grid-choices input[type=checkbox]")) {
    if (!(box instanceof HTMLInputElement)) continue;
    box.addEventListener("change", () => {
      const picked = [...document.querySelectorAll("#grid-choices input[type=checkbox]")]
        .filter((b) => b instanceof HTMLInputElement && b.checked)
        .map((b) => /** @type {ViewName} */ (/** @type {HTMLInputElement} */ (b).value));
      if (picked.length === 0) box.checked = true;
      else setGridViews(picked);
    });
  }
  layoutGrid();
  byId("save-png", HTMLButtonElement).addEventListener("click", () => saveFigures("png"));
  byId("save-svg", HTMLButtonElement).addEventListener("click", () => saveFigures("svg"));

  const floor = byId("map-floor", HTMLSelectElement);
  onRadio("map-scale", (value) => {
    state.mapScale = value === "log" ? "log" : "linear";
    floor.disabled = state.mapScale !== "log";
    drawMapView();
  });
  floor.addEventListener("change", () => {
    const v = Number(floor.value);
    if (Number.isFinite(v) && v > 0) state.floor = v;
    drawMapView();
  });

  for (const group of ["map-t", "sum-t"]) {
    onRadio(group, (value) => {
      state.timeAxis = value === "log" ? "log" : "linear";
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
  onRadio("slice-y", (value) => {
    state.sliceY = value === "log" ? "log" : "linear";
    drawSlicesView();
  });
  onRadio("slices-drag", (value) => {
    state.dragSlices = value === "zoom" ? "zoom" : "select";
    drawSlicesView();
  });
  onRadio("auto-drag", (value) => {
    state.dragAuto = value === "zoom" ? "zoom" : "select";
    drawAutoView();
  });

  // A box dragged across the autocorrelation sets the time window; across
  // the slices, the |x| window (the larger distance from the source).
  onRangeSelect(plotEl("auto"), ([a, b]) => {
    const round = (/** @type {number} */ v) => Number(v.toPrecision(3));
    setWindows({ ...getWindows(), t_min: round(a), t_max: round(b) });
    drawAutoView();
  });
  onRangeSelect(plotEl("slices"), ([a, b]) => {
    const reach = Math.floor(Math.max(Math.abs(a), Math.abs(b)));
    setWindows({ ...getWindows(), x_max: reach });
    drawSlicesView();
  });

  on("windows", () => {
    drawMapView();
    drawSlicesView();
    drawAutoView();
  });
  on("fit", takeFitOverlay);
  on("theory", (theory) => {
    state.theory = theory;
    drawSlicesView();
    drawAutoView();
  });
  on("textscale", () => window.requestAnimationFrame(() => redrawAll()));
}
