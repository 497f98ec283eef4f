// A small in-page message bus so that the page's parts (views, fits, theory,
// log, collapse) hear about each other's changes without importing each
// other. Each message names what changed; its detail is the new value. Knows
// nothing about the API, the page's elements or plotting.

/**
 * What each message carries.
 * @typedef {object} BusMessages
 * @property {import("./api.js").DatasetDetail | null} dataset the chosen dataset, loaded
 * @property {{windows: import("./windows.js").Windows, record: boolean}} windows the fit windows changed; `record` is false when undo made the change
 * @property {import("./api.js").FitResult} fit a fit finished
 * @property {{dataset: string, result: import("./api.js").FitResult}} verdict a dataset's verdict (its analysis) is known
 * @property {import("./api.js").TheoryResult | null} theory a theory overlay was computed or removed
 * @property {{job: string, fraction: number}} progress a job-progress event from the server
 * @property {{reconnected: boolean}} log the log may have changed (an event, or a reconnect)
 * @property {string} view the active view changed
 * @property {number} textscale the large-text setting changed (1 = normal)
 * @property {{name: string, matrix: number[][]} | null} couplings a coupling matrix was imported (null: none)
 */

const target = new EventTarget();

/**
 * Tells every listener that something changed.
 * @template {keyof BusMessages} K
 * @param {K} name
 * @param {BusMessages[K]} detail
 */
export function emit(name, detail) {
  target.dispatchEvent(new CustomEvent(name, { detail }));
}

/**
 * Listens for one kind of message.
 * @template {keyof BusMessages} K
 * @param {K} name
 * @param {(detail: BusMessages[K]) => void} listener
 */
export function on(name, listener) {
  target.addEventListener(name, (ev) => listener(/** @type {CustomEvent<BusMessages[K]>} */ (ev).detail));
}
