// The theory panel: choose a reference model (classical lattice walk, exact
// spin-chain dynamics, short-time expansion) and its parameters, ask the
// server to compute it on the chosen dataset's grid, and hand the result to
// the views through the bus (dashed curves on the slices and the
// autocorrelation, a difference map in the residual view). Empty fields are
// left out of the request, so the server takes them from the dataset's
// metadata. Knows nothing about plotting.

import { ApiError, THEORY_MODELS } from "./api.js";
import { emit, on } from "./bus.js";
import { byId, h } from "./dom.js";
import { cancelFit, jobId, trackJob, untrackJob } from "./fitrunner.js";
import { formatNumber } from "./format.js";
import { theoryName } from "./views.js";
import { plainMessage } from "./words.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").TheoryModel} TheoryModel */
/** @typedef {import("./api.js").TheoryRequest} TheoryRequest */
/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */

/** Request fields and their inputs, with whether they are whole numbers. */
const FIELDS = /** @type {const} */ ([
  ["gamma0", "theory-gamma0", false],
  ["alpha", "theory-alpha", false],
  ["sites", "theory-sites", true],
  ["source", "theory-source", true],
  ["coupling", "theory-coupling", false],
  ["delta", "theory-delta", false],
  ["order", "theory-order", true],
  ["samples", "theory-samples", true],
  ["trajectories", "theory-trajectories", true],
]);

const state = {
  /** @type {SessionApi | null} */
  api: null,
  /** @type {DatasetDetail | null} */
  detail: null,
  /** @type {AbortController | null} */
  running: null,
  /** @type {string | null} job id of the running computation */
  job: null,
  shown: false,
  /** @type {{name: string, matrix: number[][]} | null} the imported coupling matrix */
  couplings: null,
  /** @type {AbortController | null} the pending plan request */
  planning: null,
  /** @type {number | null} */
  planTimer: null,
};

/** @returns {TheoryModel} */
function chosenModel() {
  const checked = document.querySelector('input[name="theory-model"]:checked');
  const value = checked instanceof HTMLInputElement ? checked.value : "lattice_walk";
  return THEORY_MODELS.find((m) => m === value) ?? "lattice_walk";
}

/** Shows only the fields the chosen model takes. */
function syncFields() {
  const model = chosenModel();
  for (const field of document.querySelectorAll("#theory-form [data-models]")) {
    if (!(field instanceof HTMLElement)) continue;
    field.hidden = !(field.dataset.models ?? "").split(" ").includes(model);
  }
}

/**
 * @param {string} text
 * @param {"ok" | "error" | "pending" | ""} kind
 */
function setStatus(text, kind) {
  const status = byId("theory-status", HTMLElement);
  status.textContent = text;
  status.dataset.kind = kind;
}

/**
 * Reads the visible fields into a request.
 * @returns {TheoryRequest}
 * @throws {Error} naming the field that does not hold a number
 */
function readRequest() {
  /** @type {TheoryRequest} */
  const request = { model: chosenModel() };
  for (const [key, id, whole] of FIELDS) {
    const input = byId(id, HTMLInputElement);
    input.removeAttribute("aria-invalid");
    if (input.closest("[data-models]")?.hasAttribute("hidden")) continue;
    const text = input.value.trim();
    if (text === "") continue;
    const v = Number(text);
    const label = input.labels?.[0]?.textContent ?? key;
    if (!Number.isFinite(v) || (whole && !Number.isInteger(v))) {
      input.setAttribute("aria-invalid", "true");
      input.focus();
      throw new Error(`${label}: “${text}” is not ${whole ? "a whole number" : "a number"}.`);
    }
    request[key] = v;
  }
  if (request.model === "spin_chain") {
    const method = byId("theory-method", HTMLSelectElement).value;
    if (method === "exact" || method === "typicality" || method === "dtwa") request.method = method;
  }
  const useMatrix = byId("theory-use-matrix", HTMLInputElement);
  if (useMatrix.checked && state.couplings !== null && !useMatrix.closest("[data-models]")?.hasAttribute("hidden")) {
    request.couplings = state.couplings.matrix;
  }
  return request;
}

/** Says, before anything runs, how the server would compute the overlay and how long it would take. */
async function refreshPlan() {
  const line = byId("theory-plan", HTMLElement);
  const api = state.api;
  const d = state.detail;
  state.planning?.abort();
  if (api === null || d === null) {
    line.textContent = "";
    return;
  }
  /** @type {TheoryRequest} */
  let request;
  try {
    request = readRequest();
  } catch (e) {
    line.textContent = e instanceof Error ? e.message : String(e);
    return;
  }
  const controller = new AbortController();
  state.planning = controller;
  try {
    const plan = await api.theoryPlan(d.id, request, controller.signal);
    line.textContent = plan.ready
      ? `Will be computed by ${plan.method} on ${plan.sites} sites (source ${plan.source}): ${aboutTime(plan.seconds ?? 0)}.`
      : `Cannot be computed yet: ${plainMessage(plan.reason ?? "")}`;
  } catch (e) {
    if (e instanceof DOMException && e.name === "AbortError") return;
    line.textContent = `Cannot be computed yet: ${plainMessage(e instanceof Error ? e.message : String(e))}`;
  }
}

/**
 * An estimated duration in words.
 * @param {number} seconds
 */
function aboutTime(seconds) {
  if (seconds < 1) return "under a second";
  if (seconds < 90) return `about ${Math.round(seconds)} s`;
  if (seconds < 5400) return `about ${Math.round(seconds / 60)} min`;
  return `about ${(seconds / 3600).toFixed(1)} h`;
}

/** Plans again shortly after the last change. */
function schedulePlan() {
  if (state.planTimer !== null) window.clearTimeout(state.planTimer);
  state.planTimer = window.setTimeout(() => {
    state.planTimer = null;
    void refreshPlan();
  }, 250);
}

/** Puts the dataset's metadata in the placeholders, so empty fields say what they mean. */
function fillPlaceholders() {
  const m = state.detail?.meta;
  const say = (/** @type {string} */ id, /** @type {number | null | undefined} */ v, /** @type {string} */ otherwise) => {
    const input = byId(id, HTMLInputElement);
    input.placeholder = v === null || v === undefined ? otherwise : formatNumber(v);
    input.title = v === null || v === undefined ? "Not in the dataset's metadata: type a value." : `Empty: the dataset's metadata, ${formatNumber(v)}.`;
  };
  say("theory-alpha", m?.alpha, "not set");
  say("theory-sites", m?.chain_length, "not set");
  say("theory-source", m?.source_site, "not set");
}

/**
 * Shows what the overlay on the plots is, with the server's parameters
 * and warnings.
 * @param {import("./api.js").TheoryResult | null} result
 */
function renderSummary(result) {
  const box = byId("theory-summary", HTMLElement);
  byId("theory-clear", HTMLButtonElement).disabled = result === null;
  if (result === null) {
    box.hidden = true;
    box.replaceChildren();
    return;
  }
  const params = Object.entries(result.parameters ?? {})
    .filter(([, v]) => typeof v === "number" || typeof v === "string" || typeof v === "boolean")
    .map(([k, v]) => h("div", { class: "fact" }, [h("dt", {}, [k]), h("dd", {}, [typeof v === "number" ? formatNumber(v) : String(v)])]));
  box.replaceChildren(
    h("h3", {}, [`On the plots: ${theoryName(result.model)}`]),
    ...(result.method ? [h("p", { class: "small" }, [`Computed by ${result.method}.`])] : []),
    h("dl", { class: "facts" }, params),
    ...(result.warnings?.length ? [h("ul", { class: "warnings" }, result.warnings.map((w) => h("li", {}, [w])))] : []),
    h("p", { class: "small muted" }, ["Dashed on the slices and the autocorrelation; data − model in the Residuals view."]),
  );
  box.hidden = false;
}

async function compute() {
  const api = state.api;
  const d = state.detail;
  if (api === null || d === null) {
    setStatus("Choose a dataset first.", "error");
    return;
  }
  /** @type {TheoryRequest} */
  let request;
  try {
    request = readRequest();
  } catch (e) {
    setStatus(e instanceof Error ? e.message : String(e), "error");
    return;
  }
  state.running?.abort();
  const controller = new AbortController();
  state.running = controller;
  const job = jobId();
  request.job = job;
  state.job = job;
  const run = byId("theory-run", HTMLButtonElement);
  const stop = byId("theory-stop", HTMLButtonElement);
  run.disabled = true;
  stop.hidden = false;
  setProgress(0);
  trackJob(job, setProgress);
  setStatus(
    request.model === "spin_chain" ? "Computing the spin-chain dynamics on the server…" : "Computing on the server…",
    "pending",
  );
  const started = performance.now();
  try {
    const result = await api.theory(d.id, request, controller.signal);
    if (state.detail === null || String(state.detail.id) !== String(d.id)) return;
    setStatus(`Drawn (${((performance.now() - started) / 1000).toFixed(1)} s).`, "ok");
    state.shown = true;
    renderSummary(result);
    emit("theory", result);
  } catch (e) {
    if (e instanceof DOMException && e.name === "AbortError") setStatus("Stopped waiting; nothing drawn.", "");
    else if (e instanceof ApiError && e.status === 409) setStatus("Cancelled; nothing drawn.", "");
    else if (e instanceof ApiError && e.status === 429) setStatus(`The server is busy${e.retryAfter !== null ? `; try again in ${e.retryAfter} s` : ""}.`, "error");
    else setStatus(`Not computed: ${e instanceof Error ? e.message : String(e)}`, "error");
  } finally {
    untrackJob(job);
    if (state.running === controller) state.running = null;
    if (state.job === job) state.job = null;
    run.disabled = false;
    stop.hidden = true;
    setProgress(null);
  }
}

/** @param {number | null} fraction null hides the bar */
function setProgress(fraction) {
  const row = byId("theory-progress", HTMLElement);
  const bar = byId("theory-progress-bar", HTMLProgressElement);
  const text = byId("theory-progress-text", HTMLElement);
  row.hidden = fraction === null;
  if (fraction === null) return;
  if (fraction <= 0) {
    bar.removeAttribute("value");
    text.textContent = "working…";
  } else {
    bar.value = Math.min(1, fraction);
    text.textContent = `${Math.round(100 * Math.min(1, fraction))} %`;
  }
}

/** @param {SessionApi} api */
export function wireTheory(api) {
  state.api = api;
  syncFields();
  for (const radio of document.querySelectorAll('input[name="theory-model"]')) {
    radio.addEventListener("change", syncFields);
  }
  const form = byId("theory-form", HTMLFormElement);
  form.addEventListener("input", schedulePlan);
  form.addEventListener("change", schedulePlan);
  on("couplings", (detail) => {
    state.couplings = detail;
    const box = byId("theory-use-matrix", HTMLInputElement);
    box.disabled = detail === null;
    box.checked = detail !== null && box.checked;
    byId("theory-use-matrix-label", HTMLElement).textContent =
      detail === null
        ? "Use the imported coupling matrix (import one in the Couplings view)"
        : `Use the imported coupling matrix (${detail.name}, ${detail.matrix.length} sites)`;
    schedulePlan();
  });
  byId("theory-form", HTMLFormElement).addEventListener("submit", (ev) => {
    ev.preventDefault();
    void compute();
  });
  // Cancelling asks the server to stop (its answer is then 409); a server
  // that does not know the job keeps computing, so the page stops waiting
  // after a few seconds either way.
  byId("theory-stop", HTMLButtonElement).addEventListener("click", () => {
    const job = state.job;
    const running = state.running;
    if (job !== null) cancelFit(job);
    setStatus("Cancelling…", "pending");
    window.setTimeout(() => {
      if (state.running === running) running?.abort();
    }, 5000);
  });
  byId("theory-clear", HTMLButtonElement).addEventListener("click", () => {
    state.shown = false;
    renderSummary(null);
    setStatus("Overlay removed.", "");
    emit("theory", null);
  });
  on("dataset", (detail) => {
    const changed = detail === null || state.detail === null || String(detail.id) !== String(state.detail.id);
    state.detail = detail;
    fillPlaceholders();
    schedulePlan();
    if (changed) {
      state.running?.abort();
      if (state.shown) setStatus("", "");
      state.shown = false;
      renderSummary(null);
    }
  });
}
