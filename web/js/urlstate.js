// The view in the address bar: which dataset, which view, the collapse
// exponents and the fit windows live in the fragment (`#dataset=3&view=collapse&z=1.5`)
// so that a copied link opens the same view. The fragment never reaches the
// server, so the session token in the path stays the only secret. Knows
// nothing about the API or plotting.

/**
 * @typedef {object} ViewState
 * @property {string | null} dataset
 * @property {string | null} view
 * @property {number | null} z
 * @property {number | null} D
 * @property {number | null} t_min
 * @property {number | null} t_max
 * @property {number | null} x_max
 */

/** @type {Array<keyof ViewState>} */
const NUMERIC = ["z", "D", "t_min", "t_max", "x_max"];

/**
 * Reads the fragment. Numbers that do not parse are ignored.
 * @returns {ViewState}
 */
export function readViewState() {
  const params = new URLSearchParams(window.location.hash.replace(/^#/, ""));
  /** @type {ViewState} */
  const state = { dataset: params.get("dataset"), view: params.get("view"), z: null, D: null, t_min: null, t_max: null, x_max: null };
  for (const key of NUMERIC) {
    const text = params.get(key);
    const v = text === null || text === "" ? Number.NaN : Number(text);
    if (Number.isFinite(v)) /** @type {Record<string, unknown>} */ (state)[key] = v;
  }
  return state;
}

/**
 * Merges values into the fragment without adding a history entry (dragging
 * a slider must not fill the back button with hundreds of steps). `null`
 * removes a key.
 * @param {Partial<ViewState>} changes
 */
export function writeViewState(changes) {
  const url = new URL(window.location.href);
  const params = new URLSearchParams(url.hash.replace(/^#/, ""));
  for (const [key, value] of Object.entries(changes)) {
    if (value === null || value === undefined) params.delete(key);
    else params.set(key, typeof value === "number" ? String(Number(value.toPrecision(6))) : value);
  }
  url.hash = params.toString();
  window.history.replaceState(null, "", url);
}
