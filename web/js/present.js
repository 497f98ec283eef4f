// Presentation mode and the side panel's visibility: one large figure fills
// the screen with a results banner on it, for a projector at the back of a
// room. Keys: P enters and leaves (Escape leaves), ← and → step through the
// views, ↑ and ↓ (or Page Up and Page Down) through the datasets. The banner
// shows the latest fit of the dataset on screen; another module may supply
// what the banner says instead (the dataset's verdict) through
// setBannerSource. Knows nothing about the API's transport or plotting.

import { on } from "./bus.js";
import { byId, h } from "./dom.js";
import { dUnit, methodName, parameterValue } from "./fitformat.js";
import { setTextScale } from "./plot.js";
import { VIEW_NAMES, activate, activeView, gridShown, redrawAll, setGrid } from "./views.js";
import { windowTexts } from "./windows.js";
import { formulaNodes } from "./words.js";

/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */
/** @typedef {import("./api.js").FitResult} FitResult */

/**
 * What the banner says: a heading (the estimator or the verdict) and the
 * facts, each a symbol and its value with errors and unit.
 * @typedef {object} BannerContent
 * @property {string} heading
 * @property {Array<{name: string, value: string, unit?: string}>} items
 * @property {string} [footnote] windows and other conditions
 */

/**
 * Supplies the banner for the dataset shown, or null to fall back to the
 * latest fit.
 * @typedef {(dataset: DatasetDetail) => BannerContent | null} BannerSource
 */

const state = {
  /** @type {DatasetDetail | null} */
  dataset: null,
  /** Latest fit per dataset id, as the fit runner reported it. @type {Map<string, FitResult>} */
  fits: new Map(),
  /** @type {BannerSource | null} */
  source: null,
  presenting: false,
  /** Whether the grid was on before presenting, to restore it after. */
  gridBefore: false,
};

/**
 * Lets another module say what the banner shows (the dataset's verdict);
 * when it returns null for a dataset the latest fit is shown.
 * @param {BannerSource | null} source
 */
export function setBannerSource(source) {
  state.source = source;
  renderBanner();
}

/** Redraws the banner, for a source whose answer changed. */
export function refreshBanner() {
  renderBanner();
}

/**
 * The banner built from the latest fit of a dataset.
 * @param {DatasetDetail} d
 * @returns {BannerContent | null}
 */
function fitBanner(d) {
  const fit = state.fits.get(String(d.id));
  if (fit === undefined) return null;
  /** @type {BannerContent["items"]} */
  const items = [];
  const z = fit.parameters.z;
  const D = fit.parameters.D;
  if (z) items.push({ name: "z", value: parameterValue(z) });
  if (D) items.push({ name: "D", value: parameterValue(D), unit: dUnit(d) });
  const windows = windowTexts(fit.windows, d.meta.time_unit).map((w) => w.text);
  return {
    heading: methodName(fit.method),
    items,
    footnote: windows.length > 0 ? `windows ${windows.join(", ")}` : "all t > 0, all x",
  };
}

function renderBanner() {
  const banner = byId("present-banner", HTMLElement);
  const d = state.dataset;
  if (d === null) {
    banner.replaceChildren(h("span", { class: "banner-heading" }, ["No dataset"]));
    return;
  }
  const content = (state.source ? state.source(d) : null) ?? fitBanner(d);
  const name = h("span", { class: "banner-dataset" }, [d.name]);
  if (content === null) {
    banner.replaceChildren(name, h("span", { class: "banner-empty" }, ["No fit run on this dataset yet"]));
    return;
  }
  const items = content.items.map((item) =>
    h("span", { class: "banner-item", "data-name": item.name }, [
      h("span", { class: "banner-name" }, [item.name]),
      " = ",
      h("span", { class: "banner-value" }, [item.value]),
      ...(item.unit ? [" ", h("span", { class: "banner-unit" }, formulaNodes(item.unit))] : []),
    ]),
  );
  banner.replaceChildren(
    name,
    h("span", { class: "banner-heading" }, [content.heading]),
    ...items,
    ...(content.footnote ? [h("span", { class: "banner-foot" }, formulaNodes(content.footnote))] : []),
  );
}

/** @returns {boolean} */
export function presenting() {
  return state.presenting;
}

/**
 * Sets the plots' lettering for the large-text setting and the mode:
 * presenting enlarges it further, for the back of a room.
 * @param {boolean} large
 */
export function applyTextScale(large) {
  setTextScale((large ? 1.3 : 1) * (state.presenting ? 1.3 : 1));
}

/**
 * Enters or leaves presentation mode.
 * @param {boolean} on
 */
export function setPresenting(on) {
  if (state.presenting === on) return;
  state.presenting = on;
  if (on) {
    state.gridBefore = gridShown();
    if (state.gridBefore) setGrid(false);
  }
  document.body.classList.toggle("presenting", on);
  byId("present-banner", HTMLElement).hidden = !on;
  const button = byId("present-toggle", HTMLButtonElement);
  button.setAttribute("aria-pressed", on ? "true" : "false");
  button.textContent = on ? "Leave presentation" : "Present";
  renderBanner();
  applyTextScale(document.documentElement.classList.contains("large-text"));
  if (!on && state.gridBefore) setGrid(true);
  else window.requestAnimationFrame(() => redrawAll());
}

/**
 * Hides or shows the side panel (datasets, fits, theory, log).
 * @param {boolean} hidden
 */
function setSidebarHidden(hidden) {
  document.body.classList.toggle("sidebar-hidden", hidden);
  const button = byId("sidebar-toggle", HTMLButtonElement);
  button.setAttribute("aria-pressed", hidden ? "true" : "false");
  button.textContent = hidden ? "Show side panel" : "Hide side panel";
  window.requestAnimationFrame(() => redrawAll());
}

/**
 * Steps to the next or previous view whose tab is shown.
 * @param {number} step +1 or −1
 */
function stepView(step) {
  const names = VIEW_NAMES.filter((v) => !byId(`tab-${v}`, HTMLButtonElement).hidden);
  const i = names.indexOf(activeView());
  const next = names[(i + step + names.length) % names.length];
  if (next !== undefined) activate(next);
}

/**
 * @param {EventTarget | null} target
 * @returns {boolean} whether keys typed there belong to a form field
 */
function typingIn(target) {
  return target instanceof HTMLElement && (target.isContentEditable || ["INPUT", "SELECT", "TEXTAREA"].includes(target.tagName));
}

/**
 * Wires the buttons and keys.
 * @param {{stepDataset: (step: number) => void}} hooks
 */
export function wirePresentation(hooks) {
  byId("present-toggle", HTMLButtonElement).addEventListener("click", () => setPresenting(!state.presenting));
  byId("sidebar-toggle", HTMLButtonElement).addEventListener("click", () => setSidebarHidden(!document.body.classList.contains("sidebar-hidden")));
  on("dataset", (d) => {
    state.dataset = d;
    renderBanner();
  });
  on("fit", (fit) => {
    state.fits.set(String(fit.dataset), fit);
    renderBanner();
  });
  document.addEventListener("keydown", (ev) => {
    if (ev.defaultPrevented || ev.ctrlKey || ev.metaKey || ev.altKey || typingIn(ev.target)) return;
    if (ev.key === "p" || ev.key === "P") {
      ev.preventDefault();
      setPresenting(!state.presenting);
      return;
    }
    if (!state.presenting) return;
    /** @type {Record<string, () => void>} */
    const actions = {
      Escape: () => setPresenting(false),
      ArrowRight: () => stepView(1),
      ArrowLeft: () => stepView(-1),
      ArrowDown: () => hooks.stepDataset(1),
      PageDown: () => hooks.stepDataset(1),
      ArrowUp: () => hooks.stepDataset(-1),
      PageUp: () => hooks.stepDataset(-1),
    };
    const action = actions[ev.key];
    if (action !== undefined) {
      ev.preventDefault();
      action();
    }
  });
}
