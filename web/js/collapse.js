// The collapse view: time slices rescaled by one exponent z on both axes
// (y = t^{1/z} C against u = x / t^{1/z}), the z and D dials, the live
// collapse quality S from the server while z moves, the model's scaling
// function for (z, D) from the server, the "best fit" that asks the server
// for the automatic collapse and moves the dials to it with its one-sigma
// band and S(z) scan, and the undo history of hand moves (z, D and the fit
// windows). The browser only rescales the data for display; every S, every
// model value and every fitted number comes from the server.

import { ApiError } from "./api.js";
import { on } from "./bus.js";
import { showDesk } from "./desk.js";
import { byId } from "./dom.js";
import { runFit, cancelFit } from "./fitrunner.js";
import { withError } from "./fitformat.js";
import { formatNumber } from "./format.js";
import { LatestOnly } from "./latest.js";
import { CollapseFigure, drawQualityScan, fitToContainer } from "./plot.js";
import { textScale } from "./plotcore.js";
import { History } from "./undo.js";
import { writeViewState } from "./urlstate.js";
import { drawFailed, isVisible, note, registerView, timeAxisFor } from "./views.js";
import { getWindows, sameWindows, setWindows, windowsForRequest } from "./windows.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */
/** @typedef {import("./api.js").FitResult} FitResult */
/** @typedef {import("./windows.js").Windows} Windows */

/**
 * A hand-made state that undo restores.
 * @typedef {object} Move
 * @property {number} z
 * @property {number} D
 * @property {Windows} windows
 */

const Z_MIN = 0.5;
const Z_MAX = 2.5;
const LOG_D_MIN = -3;
const LOG_D_MAX = 3;
/** Points of the model curve asked from the server. */
const MODEL_POINTS = 241;

/**
 * The best collapse of the shown dataset and windows, from the server.
 * @typedef {object} BestCollapse
 * @property {number} z
 * @property {number | null} err one-sigma error (the server's recommended one)
 * @property {string} errText where the error comes from, in words
 * @property {number | null} D the diffusion constant fitted with z (rate convention)
 * @property {number | null} Derr its one-sigma error (bootstrap), null without one
 * @property {number | null} quality S at the minimum
 * @property {Array<[number, number]>} scan
 * @property {Windows} windows the windows it was fitted in
 */

const state = {
  /** @type {SessionApi | null} */
  api: null,
  /** @type {DatasetDetail | null} */
  detail: null,
  z: 2,
  D: 1,
  /** @type {"linear" | "log"} */
  yScale: "linear",
  showModel: true,
  /** @type {CollapseFigure | null} */
  figure: null,
  /** What the figure was built from; a change rebuilds it. */
  builtFor: "",
  /** @type {BestCollapse | null} */
  best: null,
  /** The last quality answer: S at a z. @type {{z: number, S: number | null, n: number} | null} */
  quality: null,
  /** @type {string | null} job id of a running best fit */
  bestJob: null,
  /** @type {History<Move>} */
  history: new History(/** @type {Move} */ ({ z: 2, D: 1, windows: getWindows() }), sameMove),
};

/**
 * @param {Move} a
 * @param {Move} b
 * @returns {boolean}
 */
function sameMove(a, b) {
  return a.z === b.z && a.D === b.D && sameWindows(a.windows, b.windows);
}

/**
 * @param {number} v
 * @param {number} lo
 * @param {number} hi
 * @returns {number}
 */
function clamp(v, lo, hi) {
  return Math.min(hi, Math.max(lo, v));
}

/** @returns {Move} */
function currentMove() {
  return { z: state.z, D: state.D, windows: getWindows() };
}

/** Records the current state as a settled step and puts it in the address. */
function commit() {
  state.history.commit(currentMove());
  writeViewState({ z: state.z, D: state.D });
  syncUndo();
}

function syncUndo() {
  const button = byId("collapse-undo", HTMLButtonElement);
  button.disabled = !state.history.canUndo;
  button.textContent = state.history.canUndo ? `Undo (${state.history.past.length})` : "Undo";
}

/** Shows z and D in the dials without moving anything else. */
function syncDials() {
  byId("z-range", HTMLInputElement).value = String(state.z);
  byId("z-number", HTMLInputElement).value = String(Number(state.z.toFixed(3)));
  const logD = clamp(Math.log10(state.D), LOG_D_MIN, LOG_D_MAX);
  const dRange = byId("d-range", HTMLInputElement);
  dRange.value = String(logD);
  dRange.setAttribute("aria-valuetext", `D = ${formatNumber(state.D)}`);
  byId("d-number", HTMLInputElement).value = String(Number(state.D.toPrecision(4)));
}

/**
 * The key of what the figure shows: a different dataset, window, y axis or
 * lettering needs a new figure; z and D do not.
 * @returns {string}
 */
function figureKey() {
  const d = state.detail;
  if (d === null) return "";
  const w = getWindows();
  // The lettering is part of the figure's layout (its margins and fonts),
  // so a change of large text or presentation mode builds it again.
  return `${d.id}|${d.content_hash}|${w.t_min}|${w.t_max}|${w.x_max}|${state.yScale}|${textScale}`;
}

/**
 * The rows and columns the collapse uses: times t > 0 inside the t window,
 * sites inside the |x| window (the same rule the server applies for S).
 * @param {DatasetDetail} d
 * @param {Windows} w
 */
function windowed(d, w) {
  const rows = d.t.map((_, i) => i).filter((i) => {
    const t = d.t[i] ?? 0;
    return t > 0 && (w.t_min === null || t >= w.t_min) && (w.t_max === null || t <= w.t_max);
  });
  const cols = d.x.map((_, j) => j).filter((j) => w.x_max === null || Math.abs(d.x[j] ?? 0) <= w.x_max);
  return { rows, cols };
}

/**
 * Puts a new figure (or none) in place of the old one, whose pending drag
 * redraw must not land on the new one.
 * @param {CollapseFigure | null} next
 */
function replaceFigure(next) {
  state.figure?.dispose();
  state.figure = next;
}

/** Builds the figure if its data changed, then draws it at the current z. */
function draw() {
  const d = state.detail;
  if (d === null) return;
  if (!isVisible("collapse")) return;
  const key = figureKey();
  const el = byId("view-collapse", HTMLElement);
  if (state.figure === null || key !== state.builtFor) {
    const w = getWindows();
    const { rows, cols } = windowed(d, w);
    if (rows.length < 2 || cols.length < 2) {
      state.builtFor = "";
      replaceFigure(null);
      note("collapse", rows.length < 2
        ? "A collapse needs at least two times above 0 inside the time window. Widen the window above the plots."
        : "A collapse needs at least two sites inside the |x| window. Widen the window above the plots.");
      return;
    }
    note("collapse", null);
    const built = new CollapseFigure(el);
    replaceFigure(built);
    const t = rows.map((i) => d.t[i] ?? 1);
    built.setData({
      x: cols.map((j) => d.x[j] ?? 0),
      t,
      C: rows.map((i) => cols.map((j) => d.C[i]?.[j] ?? null)),
      timeUnit: d.meta.time_unit,
      logTime: timeAxisFor(t) === "log",
      yScale: state.yScale,
      revision: key,
    });
    state.builtFor = key;
    const left = d.t.length - rows.length;
    byId("caption-collapse", HTMLElement).textContent =
      `${rows.length} times × ${cols.length} sites, coloured by time` +
      (left > 0 ? `; ${left} time${left === 1 ? "" : "s"} outside the window or at t ≤ 0 left out.` : ".");
  }
  const figure = state.figure;
  if (figure === null) return;
  figure.setZ(state.z).catch((e) => drawFailed("collapse", e));
  requestModel();
}

/**
 * Redraws for a new z as fast as possible and records how long it took from
 * the input event to the redrawn figure (User Timing entries named
 * `collapse-redraw`, which the browser test reads).
 * @param {number} since the input event's time stamp
 */
function redrawForZ(since) {
  const figure = state.figure;
  if (figure === null || !isVisible("collapse")) return;
  window.clearTimeout(modelTimer);
  figure
    .setZ(state.z, { live: true })
    .then(() => {
      const end = performance.now();
      // Event time stamps share performance.now()'s clock; guard against a
      // browser that stamps events otherwise.
      const start = since > 0 && since <= end ? since : end;
      performance.measure("collapse-redraw", { start, end });
    })
    .catch((e) => drawFailed("collapse", e));
}

/**
 * Why the server gave no answer, in words: a 404 here means the server
 * does not offer the computation at all.
 * @param {unknown} error
 * @returns {string}
 */
function unavailable(error) {
  if (error instanceof ApiError && error.status === 404) return "this server does not offer it (not found).";
  return error instanceof Error ? error.message : String(error);
}

const qualityRequests = new LatestOnly(
  /** @param {{id: string, z: number, windows: Windows}} p */
  (p) => {
    const api = state.api;
    if (api === null) return Promise.reject(new Error("no session"));
    return api.collapseQuality(p.id, p.z, windowsForRequest(p.windows));
  },
  (answer, p) => {
    if (state.detail === null || String(state.detail.id) !== p.id) return;
    const S = typeof answer.quality === "number" && Number.isFinite(answer.quality) ? answer.quality : null;
    state.quality = { z: p.z, S, n: answer.n_points };
    renderQuality();
    drawInsetSoon();
  },
  (error) => {
    const readout = byId("quality-readout", HTMLOutputElement);
    readout.dataset.state = "error";
    readout.textContent = `S not available: ${unavailable(error)}`;
  },
);

function requestQuality() {
  const d = state.detail;
  if (d === null) return;
  qualityRequests.request({ id: String(d.id), z: state.z, windows: getWindows() });
}

function renderQuality() {
  const readout = byId("quality-readout", HTMLOutputElement);
  const q = state.quality;
  if (q === null) {
    readout.textContent = "S = …";
    return;
  }
  readout.dataset.state = "ok";
  readout.replaceChildren();
  const main = document.createElement("span");
  main.className = "quality-value";
  main.textContent = q.S === null ? "S: no overlap" : `S = ${formatNumber(q.S)}`;
  const sub = document.createElement("span");
  sub.className = "quality-sub";
  sub.textContent = q.S === null ? `at z = ${q.z.toFixed(3)}: no point has partners` : `at z = ${q.z.toFixed(3)} · ${q.n} points`;
  readout.append(main, sub);
  readout.title = "Collapse quality S(z) from the server: the mean squared distance of each point from the other times' curves, in units of the errors. About 1 means the slices agree within their errors; lower is better.";
}

/** The largest z with a model curve: the largest stable index. */
const STABLE_Z_MAX = 2;

/**
 * Says why the model curve is missing, under the controls, or clears that.
 * @param {string | null} text
 */
function modelNote(text) {
  const el = byId("model-note", HTMLElement);
  el.textContent = text ?? "";
  el.hidden = text === null;
}

const modelRequests = new LatestOnly(
  /** @param {{z: number, D: number, range: [number, number]}} p */
  (p) => {
    const api = state.api;
    if (api === null) return Promise.reject(new Error("no session"));
    return api.scalingFunction(p.z, p.D, p.range[0], p.range[1], MODEL_POINTS);
  },
  (answer, p) => {
    if (!state.showModel || state.figure === null) return;
    state.figure.setModel({ u: answer.u, f: answer.f, label: `model: z = ${p.z.toFixed(3)}, D = ${formatNumber(p.D)}` });
    redrawModelSoon();
  },
  (error) => modelNote(`Model curve not available: ${unavailable(error)}`),
);

function requestModel() {
  const figure = state.figure;
  if (figure === null) return;
  if (!state.showModel) {
    modelRequests.forget();
    modelNote(null);
    figure.setModel(null);
    figure.redraw().catch((e) => drawFailed("collapse", e));
    return;
  }
  // Symmetric stable laws have index μ ≤ 2: beyond z = 2 the scaling form
  // has no model curve, and the caption says so instead of asking.
  if (state.z > STABLE_Z_MAX) {
    modelRequests.forget();
    figure.setModel(null);
    redrawModelSoon();
    modelNote(`No model curve above z = ${STABLE_Z_MAX}: the stable scaling functions need z ≤ 2.`);
    return;
  }
  modelNote(null);
  // The curve is asked for where it shows, finely enough to look smooth.
  const [lo, hi] = figure.shownU();
  modelRequests.request({ z: state.z, D: state.D, range: [lo, hi] });
}

/** Pending redraw for a new model curve. */
let modelTimer = 0;

/**
 * Draws a new model curve once z has rested for a moment: while z moves, the
 * curve rides along with the next redraw of the data instead of costing a
 * redraw of its own.
 */
function redrawModelSoon() {
  window.clearTimeout(modelTimer);
  modelTimer = window.setTimeout(() => {
    state.figure?.redraw().catch((e) => drawFailed("collapse", e));
  }, 60);
}

/** Pending redraw of the S(z) inset. */
let insetTimer = 0;

/**
 * Moves the inset's marker to the newest S once z has rested for a moment:
 * during a drag a redraw of the inset per answer would take the frames the
 * collapse needs.
 */
function drawInsetSoon() {
  window.clearTimeout(insetTimer);
  insetTimer = window.setTimeout(drawInset, 120);
}

/** Draws the S(z) inset when a best fit gave a scan. */
function drawInset() {
  window.clearTimeout(insetTimer);
  const el = byId("collapse-inset", HTMLElement);
  const best = state.best;
  const wanted = best !== null && best.scan.length > 0;
  if (el.hidden === wanted) {
    // The collapse gives room to the scan or takes it back.
    el.hidden = !wanted;
    window.requestAnimationFrame(() => fitToContainer(byId("view-collapse", HTMLElement)));
  }
  if (best === null || !wanted || !isVisible("collapse")) return;
  const q = state.quality;
  drawQualityScan(el, {
    scan: best.scan,
    best: best.z,
    range: best.err !== null ? [best.z - best.err, best.z + best.err] : null,
    current: q === null ? null : { z: q.z, S: q.S },
  }).catch(() => {
    el.hidden = true;
  });
}

/** Shades the best z's one-sigma range on the z slider and says it in words. */
function renderBand() {
  const band = byId("z-band", HTMLElement);
  const text = byId("z-band-text", HTMLElement);
  const best = state.best;
  if (best === null) {
    band.hidden = true;
    byId("collapse-pin", HTMLButtonElement).hidden = true;
    text.textContent = "";
    return;
  }
  const err = best.err ?? 0;
  const lo = clamp((best.z - err - Z_MIN) / (Z_MAX - Z_MIN), 0, 1);
  const hi = clamp((best.z + err - Z_MIN) / (Z_MAX - Z_MIN), 0, 1);
  band.style.setProperty("--lo", String(lo));
  band.style.setProperty("--hi", String(hi));
  band.hidden = false;
  byId("collapse-pin", HTMLButtonElement).hidden = false;
  const q = best.quality === null ? "" : ` · S = ${formatNumber(best.quality)}`;
  const d = best.D === null ? "" : best.Derr === null ? `, D = ${formatNumber(best.D)}` : `, D = ${withError(best.D, best.Derr)}`;
  text.textContent = best.err === null
    ? `Best fit z = ${best.z.toFixed(3)}${d} (no error estimate)${q}`
    : `Best fit z = ${withError(best.z, best.err)}${d} (${best.errText}; z shaded on the slider)${q}`;
}

/**
 * Reads the best collapse out of a fit result of the collapse method.
 * @param {FitResult} fit
 * @returns {BestCollapse | null}
 */
function bestFrom(fit) {
  const z = fit.parameters.z;
  if (!z || !Number.isFinite(z.value)) return null;
  const report = /** @type {Record<string, unknown>} */ (fit.report ?? {});
  const scan = Array.isArray(report.z_scan)
    ? /** @type {unknown[]} */ (report.z_scan)
        .filter((p) => Array.isArray(p) && p.length >= 2)
        .map((p) => /** @type {[number, number]} */ ([Number(/** @type {unknown[]} */ (p)[0]), Number(/** @type {unknown[]} */ (p)[1])]))
    : [];
  const source = typeof report.z_err_source === "string" ? report.z_err_source : z.err_bootstrap !== null && z.err_bootstrap !== undefined ? "bootstrap" : "fit";
  const qv = fit.quality.collapse_quality ?? report.quality_min;
  const D = fit.parameters.D;
  const hasD = D !== undefined && Number.isFinite(D.value);
  return {
    z: z.value,
    D: hasD ? D.value : null,
    Derr: hasD && D.err !== null && D.err !== undefined && Number.isFinite(D.err) ? D.err : null,
    err: z.err ?? z.err_bootstrap ?? null,
    errText: source === "bootstrap" ? "bootstrap one sigma" : source === "profile" ? "one sigma from the χ² profile" : "one sigma",
    quality: typeof qv === "number" ? qv : null,
    scan,
    windows: {
      t_min: fit.windows?.t_min ?? null,
      t_max: fit.windows?.t_max ?? null,
      x_max: fit.windows?.x_max ?? null,
    },
  };
}

/**
 * Takes in any finished collapse fit of the shown dataset: its band and scan
 * are drawn; the dials move only when this view's button asked for it.
 * @param {FitResult} fit
 */
function takeFit(fit) {
  const d = state.detail;
  if (d === null || String(fit.dataset) !== String(d.id) || fit.method !== "collapse") return;
  const best = bestFrom(fit);
  if (best === null) return;
  state.best = best;
  renderBand();
  drawInset();
}

async function bestFit() {
  const d = state.detail;
  const button = byId("collapse-best", HTMLButtonElement);
  const text = byId("z-band-text", HTMLElement);
  if (d === null) return;
  if (state.bestJob !== null) {
    cancelFit(state.bestJob);
    return;
  }
  button.classList.add("is-running");
  button.textContent = "Fitting… (press to cancel)";
  text.textContent = "The server is searching for the best collapse…";
  let result = null;
  try {
    result = await runFit("collapse", {
      onStart: (job) => {
        state.bestJob = job;
      },
      onProgress: (fraction) => {
        button.textContent = `Fitting ${Math.round(100 * fraction)} % (press to cancel)`;
      },
    });
  } catch (e) {
    text.textContent = e instanceof ApiError && e.status === 409
      ? "Best fit cancelled."
      : `Best fit failed: ${e instanceof Error ? e.message : String(e)}`;
  } finally {
    state.bestJob = null;
    button.classList.remove("is-running");
    button.textContent = "Best fit";
  }
  if (result === null || state.detail === null || String(result.dataset) !== String(state.detail.id)) return;
  const best = bestFrom(result);
  if (best === null) {
    text.textContent = "The server's collapse fit returned no z.";
    return;
  }
  state.z = clamp(best.z, Z_MIN, Z_MAX);
  const D = result.parameters.D;
  if (D && Number.isFinite(D.value) && D.value > 0) state.D = D.value;
  syncDials();
  commit();
  draw();
  requestQuality();
  renderBand();
  drawInset();
}

/**
 * Restores an earlier (or later) state.
 * @param {Move | null} move
 */
function restore(move) {
  if (move === null) return;
  state.z = move.z;
  state.D = move.D;
  syncDials();
  writeViewState({ z: state.z, D: state.D });
  if (!sameWindows(move.windows, getWindows())) setWindows(move.windows, { record: false });
  draw();
  requestQuality();
  syncUndo();
}

export function undo() {
  restore(state.history.undo());
}

export function redo() {
  restore(state.history.redo());
}

/**
 * A move of z waiting for the next frame: the time stamp of the oldest
 * input it stands for, and the frame request (0: none).
 */
const waiting = { since: 0, frame: 0 };

/**
 * Sets z from the dial or the field while it moves. A drag sends inputs
 * faster than a figure can be redrawn; they are coalesced so that each frame
 * draws only the newest z, once, and asks the server once.
 * @param {number} z
 * @param {number} since event time stamp
 */
function moveZ(z, since) {
  state.z = clamp(z, Z_MIN, Z_MAX);
  if (waiting.frame !== 0) return;
  waiting.since = since;
  waiting.frame = window.requestAnimationFrame(() => {
    waiting.frame = 0;
    redrawForZ(waiting.since);
    requestQuality();
    requestModel();
  });
}

/**
 * Wires the dials, the best-fit button, undo, and the bus.
 * @param {SessionApi} api
 * @param {{z: number | null, D: number | null}} initial from the address
 */
export function wireCollapse(api, initial) {
  state.api = api;
  if (initial.z !== null) state.z = clamp(initial.z, Z_MIN, Z_MAX);
  if (initial.D !== null && initial.D > 0) state.D = initial.D;
  state.history.reset(currentMove());
  syncDials();
  syncUndo();

  const zRange = byId("z-range", HTMLInputElement);
  const zNumber = byId("z-number", HTMLInputElement);
  zRange.addEventListener("input", (ev) => {
    const z = Number(zRange.value);
    zNumber.value = String(Number(z.toFixed(3)));
    moveZ(z, ev.timeStamp);
  });
  zRange.addEventListener("change", () => commit());
  zNumber.addEventListener("change", (ev) => {
    const z = Number(zNumber.value);
    if (!Number.isFinite(z) || z < Z_MIN || z > Z_MAX) {
      zNumber.setAttribute("aria-invalid", "true");
      zNumber.title = `z must lie between ${Z_MIN} and ${Z_MAX}.`;
      return;
    }
    zNumber.removeAttribute("aria-invalid");
    zNumber.title = "";
    zRange.value = String(z);
    moveZ(z, ev.timeStamp);
    commit();
  });

  const dRange = byId("d-range", HTMLInputElement);
  const dNumber = byId("d-number", HTMLInputElement);
  dRange.addEventListener("input", () => {
    state.D = Number((10 ** Number(dRange.value)).toPrecision(4));
    dNumber.value = String(state.D);
    dRange.setAttribute("aria-valuetext", `D = ${formatNumber(state.D)}`);
    requestModel();
  });
  dRange.addEventListener("change", () => commit());
  dNumber.addEventListener("change", () => {
    const D = Number(dNumber.value);
    if (!Number.isFinite(D) || D <= 0) {
      dNumber.setAttribute("aria-invalid", "true");
      dNumber.title = "D must be a number above 0.";
      return;
    }
    dNumber.removeAttribute("aria-invalid");
    dNumber.title = "";
    state.D = D;
    syncDials();
    requestModel();
    commit();
  });

  byId("collapse-best", HTMLButtonElement).addEventListener("click", () => void bestFit());
  // Pinning happens on the fit's card in the fit panel, which holds the
  // comment form; this takes the person there.
  byId("collapse-pin", HTMLButtonElement).addEventListener("click", () => {
    showDesk("fits");
    const open = document.querySelector('#fit-results [data-testid="fit-card"][data-method="collapse"] [data-testid="pin-open"]');
    if (open instanceof HTMLButtonElement && !open.disabled) {
      if (open.getAttribute("aria-expanded") !== "true") open.click();
      open.closest("article")?.querySelector("textarea")?.focus();
    }
  });
  byId("collapse-undo", HTMLButtonElement).addEventListener("click", () => undo());
  byId("collapse-model", HTMLInputElement).addEventListener("change", (ev) => {
    state.showModel = /** @type {HTMLInputElement} */ (ev.target).checked;
    requestModel();
  });
  for (const radio of document.querySelectorAll('input[name="collapse-y"]')) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (!radio.checked) return;
      state.yScale = radio.value === "log" ? "log" : "linear";
      draw();
    });
  }

  // Ctrl+Z and Ctrl+Shift+Z (or Ctrl+Y) anywhere except in a text field,
  // where they keep undoing typing.
  document.addEventListener("keydown", (ev) => {
    if (!(ev.ctrlKey || ev.metaKey) || ev.altKey) return;
    const target = ev.target;
    if (target instanceof HTMLTextAreaElement) return;
    if (target instanceof HTMLInputElement && !["range", "radio", "checkbox", "button"].includes(target.type)) return;
    const key = ev.key.toLowerCase();
    if (key === "z" && !ev.shiftKey) {
      ev.preventDefault();
      undo();
    } else if ((key === "z" && ev.shiftKey) || key === "y") {
      ev.preventDefault();
      redo();
    }
  });

  registerView("collapse", {
    shown: () => {
      draw();
      if (state.figure !== null) fitToContainer(byId("view-collapse", HTMLElement));
      if (state.quality === null) requestQuality();
      drawInset();
    },
    figures: () => [byId("view-collapse", HTMLElement)],
  });

  on("dataset", (detail) => {
    const changed = detail === null || state.detail === null || String(detail.id) !== String(state.detail.id) || detail.content_hash !== state.detail.content_hash;
    state.detail = detail;
    if (!changed) {
      // The same data came back (metadata saved, a reconnect): redraw, since
      // the time unit in the colour bar may have changed.
      state.builtFor = "";
      draw();
      return;
    }
    state.best = null;
    state.quality = null;
    replaceFigure(null);
    state.builtFor = "";
    qualityRequests.forget();
    modelRequests.forget();
    renderBand();
    renderQuality();
    drawInset();
    if (detail !== null) {
      draw();
      requestQuality();
    }
  });
  on("windows", ({ record }) => {
    // A best fit belongs to the windows it was fitted in.
    if (state.best !== null && !sameWindows(state.best.windows, getWindows())) {
      state.best = null;
      renderBand();
      drawInset();
    }
    if (record) {
      state.history.commit(currentMove());
      syncUndo();
    }
    draw();
    requestQuality();
  });
  on("fit", takeFit);
}

