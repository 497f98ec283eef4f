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
 * Merges values into the fragment. By default no history entry is added
 * (dragging a slider must not fill the back button with hundreds of steps);
 * `push` adds one, for a change of dataset or view that Back should undo.
 * `null` removes a key.
 * @param {Partial<ViewState>} changes
 * @param {{push?: boolean}} [options]
 */
export function writeViewState(changes, options = {}) {
  const url = new URL(window.location.href);
  const params = new URLSearchParams(url.hash.replace(/^#/, ""));
  for (const [key, value] of Object.entries(changes)) {
    if (value === null || value === undefined) params.delete(key);
    else params.set(key, typeof value === "number" ? String(Number(value.toPrecision(6))) : value);
  }
  url.hash = params.toString();
  if (url.href === window.location.href) return;
  if (options.push) window.history.pushState(null, "", url);
  else window.history.replaceState(null, "", url);
}
