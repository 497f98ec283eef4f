// The fit windows: the time range [t_min, t_max] and the space range
// |x| ≤ x_max that every fit request, every collapse-quality request and
// every pinned result carries. Owns the window bar above the plots (chips,
// the typed form) and the address-bar copy of the windows. Views set windows
// by dragging through `setWindows`; they learn of changes from the bus.
// Knows nothing about plotting.

import { emit } from "./bus.js";
import { byId, h } from "./dom.js";
import { formatNumber } from "./format.js";
import { writeViewState } from "./urlstate.js";

/**
 * @typedef {object} Windows
 * @property {number | null} t_min
 * @property {number | null} t_max
 * @property {number | null} x_max
 */

/** @type {Windows} */
let current = { t_min: null, t_max: null, x_max: null };
/** @type {import("./api.js").DefaultWindows | null} the rule's windows of the chosen dataset */
let defaults = null;
/** Time unit of the chosen dataset, for the chips. */
let timeUnit = "";

/** @returns {Windows} a copy of the windows in force */
export function getWindows() {
  return { ...current };
}

/**
 * @param {Windows} a
 * @param {Windows} b
 * @returns {boolean}
 */
export function sameWindows(a, b) {
  return a.t_min === b.t_min && a.t_max === b.t_max && a.x_max === b.x_max;
}

/**
 * The windows as a request body field: unset bounds left out.
 * @param {Windows} w
 * @returns {import("./api.js").FitWindows}
 */
export function windowsForRequest(w) {
  /** @type {import("./api.js").FitWindows} */
  const out = {};
  if (w.t_min !== null) out.t_min = w.t_min;
  if (w.t_max !== null) out.t_max = w.t_max;
  if (w.x_max !== null) out.x_max = w.x_max;
  return out;
}

/**
 * Says why a set of windows cannot be used, or null when it can.
 * @param {Windows} w
 * @returns {string | null}
 */
export function windowProblem(w) {
  if (w.t_min !== null && !(w.t_min >= 0)) return "The start time must be 0 or later.";
  if (w.t_max !== null && !(w.t_max > 0)) return "The end time must be above 0.";
  if (w.t_min !== null && w.t_max !== null && !(w.t_min < w.t_max)) return "The start time must come before the end time.";
  if (w.x_max !== null && !(w.x_max >= 0 && Number.isInteger(w.x_max))) return "The |x| limit must be a whole number of sites, 0 or more.";
  return null;
}

/**
 * Short texts of a window set, one per bound that is set, e.g.
 * `1.5 ≤ t ≤ 20 1/γ0` and `|x| ≤ 15`. Used by the bar and by result cards.
 * @param {import("./api.js").FitWindows | null | undefined} w
 * @param {string} [unit] time unit
 * @returns {Array<{key: "t" | "x", text: string}>}
 */
export function windowTexts(w, unit = "") {
  /** @type {Array<{key: "t" | "x", text: string}>} */
  const out = [];
  if (!w) return out;
  const u = unit ? ` ${unit}` : "";
  const lo = w.t_min ?? null;
  const hi = w.t_max ?? null;
  if (lo !== null && hi !== null) out.push({ key: "t", text: `${formatNumber(lo)} ≤ t ≤ ${formatNumber(hi)}${u}` });
  else if (lo !== null) out.push({ key: "t", text: `t ≥ ${formatNumber(lo)}${u}` });
  else if (hi !== null) out.push({ key: "t", text: `t ≤ ${formatNumber(hi)}${u}` });
  if (w.x_max !== null && w.x_max !== undefined) out.push({ key: "x", text: `|x| ≤ ${formatNumber(w.x_max)}` });
  return out;
}

/**
 * Chips for a window set inside a card or log entry (no remove buttons).
 * @param {import("./api.js").FitWindows | null | undefined} w
 * @param {string} [unit]
 * @returns {HTMLElement}
 */
export function windowChipList(w, unit = "") {
  const texts = windowTexts(w, unit);
  const items = texts.length > 0 ? texts.map((t) => h("li", { class: "chip" }, [t.text])) : [h("li", { class: "chip chip-quiet" }, ["all t > 0, all x"])];
  return h("ul", { class: "chips chips-inline", "aria-label": "Windows" }, items);
}

/**
 * Changes the windows, redraws the bar, updates the address and tells the
 * page. Invalid windows are refused with the reason.
 * @param {Windows} w
 * @param {{record?: boolean}} [options] record: false when undo restores an older state
 * @returns {string | null} the problem, or null when the windows were taken
 */
export function setWindows(w, options = {}) {
  const problem = windowProblem(w);
  if (problem !== null) return problem;
  if (sameWindows(w, current)) return null;
  current = { ...w };
  renderBar();
  writeViewState({ t_min: current.t_min, t_max: current.t_max, x_max: current.x_max });
  emit("windows", { windows: getWindows(), record: options.record ?? true });
  return null;
}

/**
 * Sets the windows from the address at start-up, without telling anyone.
 * @param {Windows} w
 */
export function initWindows(w) {
  if (windowProblem(w) === null) current = { ...w };
  renderBar();
}

/** @param {string} unit the chosen dataset's time unit */
export function setWindowTimeUnit(unit) {
  timeUnit = unit;
  renderBar();
}

/**
 * Remembers the server's default windows (one window rule) for the chosen
 * dataset; the bar shows them while no window is set, and every fit sent
 * without windows uses them on the server.
 * @param {import("./api.js").DefaultWindows | null} dw
 */
export function setDefaultWindows(dw) {
  defaults = dw;
  renderBar();
}

/** @returns {string} the default windows in words, for the quiet chip */
function defaultText() {
  if (defaults === null) return "all t > 0, all x";
  const texts = windowTexts({ t_min: defaults.t_min, t_max: defaults.t_max, x_max: defaults.x_max }, timeUnit).map((t) => t.text);
  return `default: ${texts.join(", ")} (${defaults.bootstrap} resamples)`;
}

function renderBar() {
  const list = byId("window-chips", HTMLUListElement);
  const texts = windowTexts(current, timeUnit);
  if (texts.length === 0) {
    list.replaceChildren(h("li", { class: "chip chip-quiet", "data-testid": "window-chip", title: defaults?.rule ?? "" }, [defaultText()]));
  } else {
    list.replaceChildren(
      ...texts.map(({ key, text }) => {
        const remove = h("button", { type: "button", class: "chip-remove", "aria-label": key === "t" ? "Remove the time window" : "Remove the |x| window", title: "Remove" }, ["×"]);
        remove.addEventListener("click", () => {
          setWindows(key === "t" ? { ...current, t_min: null, t_max: null } : { ...current, x_max: null });
        });
        return h("li", { class: "chip", "data-testid": "window-chip", "data-window": key }, [h("span", {}, [text]), remove]);
      }),
    );
  }
  fillForm();
}

function fillForm() {
  const show = (/** @type {number | null} */ v) => (v === null ? "" : String(v));
  byId("win-tmin", HTMLInputElement).value = show(current.t_min);
  byId("win-tmax", HTMLInputElement).value = show(current.t_max);
  byId("win-xmax", HTMLInputElement).value = show(current.x_max);
}

/**
 * @param {string} id
 * @param {string} label
 * @returns {number | null}
 */
function readField(id, label) {
  const el = byId(id, HTMLInputElement);
  const text = el.value.trim();
  el.removeAttribute("aria-invalid");
  if (text === "") return null;
  const v = Number(text);
  if (!Number.isFinite(v)) {
    el.setAttribute("aria-invalid", "true");
    throw new Error(`${label}: “${text}” is not a number.`);
  }
  return v;
}

/** Wires the bar's form and its toggle. */
export function wireWindows() {
  const form = byId("window-form", HTMLFormElement);
  const toggle = byId("window-edit", HTMLButtonElement);
  const status = byId("window-status", HTMLElement);
  const open = (/** @type {boolean} */ on) => {
    form.hidden = !on;
    toggle.setAttribute("aria-expanded", on ? "true" : "false");
    toggle.textContent = on ? "Close" : "Type…";
    if (on) byId("win-tmin", HTMLInputElement).focus();
  };
  toggle.addEventListener("click", () => open(form.hidden !== false));
  form.addEventListener("submit", (ev) => {
    ev.preventDefault();
    status.textContent = "";
    status.dataset.kind = "";
    let w;
    try {
      w = {
        t_min: readField("win-tmin", "t from"),
        t_max: readField("win-tmax", "t to"),
        x_max: readField("win-xmax", "|x| up to"),
      };
    } catch (e) {
      status.textContent = e instanceof Error ? e.message : String(e);
      status.dataset.kind = "error";
      return;
    }
    const problem = setWindows(w);
    if (problem !== null) {
      status.textContent = problem;
      status.dataset.kind = "error";
    } else {
      status.textContent = "Applied.";
      status.dataset.kind = "ok";
    }
  });
  byId("window-clear", HTMLButtonElement).addEventListener("click", () => {
    status.textContent = "";
    setWindows({ t_min: null, t_max: null, x_max: null });
  });
  form.addEventListener("keydown", (ev) => {
    if (ev.key === "Escape") {
      open(false);
      toggle.focus();
    }
  });
  renderBar();
}
