// Runs fits on the server for whoever asks (the fit panel, the collapse
// view's best fit): picks a job id, sends the method with the fit windows in
// force, routes the server's job-progress events to the asker (also for
// other jobs of this page, such as theory computations), cancels on request,
// and announces every finished fit on the bus. Knows nothing about the
// page's elements or plotting.

import { emit, on } from "./bus.js";
import { getWindows, windowsForRequest } from "./windows.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").FitMethod} FitMethod */
/** @typedef {import("./api.js").FitResult} FitResult */

/**
 * @typedef {object} FitHooks
 * @property {(job: string) => void} [onStart]
 * @property {(fraction: number) => void} [onProgress]
 */

const state = {
  /** @type {SessionApi | null} */
  api: null,
  /** @type {string | null} */
  datasetId: null,
  /** @type {Map<string, FitHooks>} */
  running: new Map(),
};

/**
 * A job id nobody else will pick: 96 random bits in hex. (crypto.randomUUID
 * exists only in secure contexts, and a lab network is often plain http.)
 * @returns {string}
 */
export function jobId() {
  const bytes = new Uint8Array(12);
  crypto.getRandomValues(bytes);
  return "job-" + Array.from(bytes, (b) => b.toString(16).padStart(2, "0")).join("");
}

/**
 * Runs one estimator on the chosen dataset inside the current windows.
 * Rejects with the server's ApiError (409 when cancelled, 429 when busy,
 * 422 for windows or options it refuses).
 * @param {FitMethod} method
 * @param {FitHooks} [hooks]
 * @param {Record<string, unknown>} [options]
 * @returns {Promise<FitResult>}
 */
export async function runFit(method, hooks = {}, options = {}) {
  const api = state.api;
  const id = state.datasetId;
  if (api === null || id === null) throw new Error("no dataset is chosen");
  const job = jobId();
  state.running.set(job, hooks);
  hooks.onStart?.(job);
  try {
    const result = await api.fit(id, { method, windows: windowsForRequest(getWindows()), options, job });
    emit("fit", result);
    return result;
  } finally {
    state.running.delete(job);
  }
}

/**
 * Asks the server to stop a job; its fit request then fails with 409.
 * @param {string} job
 */
export function cancelFit(job) {
  const api = state.api;
  if (api === null) return;
  api.cancelJob(job).catch(() => {
    // The job may have finished in the meantime; its answer arrives anyway.
  });
}

/**
 * Routes job-progress events of a job this page started elsewhere (a
 * theory computation) to a callback, until `untrackJob`.
 * @param {string} job
 * @param {(fraction: number) => void} onProgress
 */
export function trackJob(job, onProgress) {
  state.running.set(job, { onProgress });
}

/** @param {string} job */
export function untrackJob(job) {
  state.running.delete(job);
}

/** @param {SessionApi} api */
export function wireFitRunner(api) {
  state.api = api;
  on("dataset", (detail) => {
    state.datasetId = detail === null ? null : String(detail.id);
  });
  on("progress", ({ job, fraction }) => {
    state.running.get(job)?.onProgress?.(fraction);
  });
}
