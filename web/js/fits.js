// The fit panel: the list of estimators, running one on the chosen dataset
// (through fitrunner.js, with the windows in force), its progress bar and
// cancel button, and a card per finished fit with the server's numbers in
// plain words — parameters with fit and bootstrap errors, quality, why it
// stopped, warnings — and the action to pin it to the log. Knows nothing
// about plotting: fitted curves reach the plots through the bus.

import { ApiError, FIT_METHODS } from "./api.js";
import { emit, on } from "./bus.js";
import { byId, h } from "./dom.js";
import { cancelFit, runFit } from "./fitrunner.js";
import { METHOD_TEXT, dUnit, errText, fitSummary, methodName, parameterOrder, parameterText, parameterValue, qualityRows, terminationText, withError } from "./fitformat.js";
import { formatNumber } from "./format.js";
import { pinForm } from "./pinform.js";
import { activate } from "./views.js";
import { windowChipList } from "./windows.js";
import { reportName, valueWords } from "./words.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").FitResult} FitResult */
/** @typedef {import("./api.js").FitMethod} FitMethod */
/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */

/** Cards kept in the panel; older ones drop off (pinned ones live in the log). */
const MAX_CARDS = 8;

const state = {
  /** @type {SessionApi | null} */
  api: null,
  canEdit: false,
  /** @type {DatasetDetail | null} */
  detail: null,
  /** @type {string | null} */
  job: null,
  cards: 0,
};

/** @returns {FitMethod} */
function chosenMethod() {
  const value = byId("fit-method", HTMLSelectElement).value;
  return FIT_METHODS.find((m) => m === value) ?? "tail";
}

function renderMethods() {
  const select = byId("fit-method", HTMLSelectElement);
  select.replaceChildren(...FIT_METHODS.map((method) => h("option", { value: method }, [METHOD_TEXT[method][0]])));
  const describe = () => {
    byId("fit-method-text", HTMLElement).textContent = METHOD_TEXT[chosenMethod()][1];
  };
  select.addEventListener("change", describe);
  describe();
}

/**
 * @param {string} text
 * @param {"ok" | "error" | "pending" | ""} kind
 */
function setStatus(text, kind) {
  const status = byId("fit-status", HTMLElement);
  status.textContent = text;
  status.dataset.kind = kind;
}

/** @param {number | null} fraction null hides the bar */
function setProgress(fraction) {
  const row = byId("fit-progress", HTMLElement);
  const bar = byId("fit-progress-bar", HTMLProgressElement);
  const text = byId("fit-progress-text", HTMLElement);
  row.hidden = fraction === null;
  if (fraction === null) return;
  if (fraction <= 0) {
    bar.removeAttribute("value");
    text.textContent = "starting…";
  } else {
    bar.value = Math.min(1, fraction);
    text.textContent = `${Math.round(100 * Math.min(1, fraction))} %`;
  }
}

/** Estimator settings the panel offers, by request field. */
const OPTION_FIELDS = /** @type {const} */ ([
  ["bootstrap", "fit-opt-bootstrap", true],
  ["seed", "fit-opt-seed", true],
  ["q", "fit-opt-q", false],
]);

/** The panel's settings each method reads (the server refuses the others by name). */
const METHOD_OPTIONS = /** @type {Record<string, readonly string[]>} */ ({
  tail: [],
  width: ["q"],
  collapse: ["bootstrap", "seed"],
  profile: ["bootstrap", "seed"],
  lattice_walk: [],
  short_time: [],
  analysis: ["bootstrap", "seed"],
});

/**
 * The settings typed in the panel's options that `method` reads; empty
 * fields are left to the server's defaults.
 * @param {string} method
 * @returns {Record<string, number>}
 * @throws {Error} naming the field that does not hold a number
 */
function readOptions(method) {
  /** @type {Record<string, number>} */
  const options = {};
  const taken = METHOD_OPTIONS[method] ?? [];
  for (const [key, id, whole] of OPTION_FIELDS) {
    if (!taken.includes(key)) continue;
    const input = byId(id, HTMLInputElement);
    input.removeAttribute("aria-invalid");
    const text = input.value.trim();
    if (text === "") continue;
    const v = Number(text);
    if (!Number.isFinite(v) || (whole && (!Number.isInteger(v) || v < 0))) {
      input.setAttribute("aria-invalid", "true");
      throw new Error(`${input.labels?.[0]?.textContent ?? key}: “${text}” is not ${whole ? "a whole number" : "a number"}.`);
    }
    options[key] = v;
  }
  return options;
}

/**
 * Runs the chosen method and shows its card.
 * @param {FitMethod} method
 */
async function run(method) {
  if (state.detail === null) {
    setStatus("Choose a dataset first.", "error");
    return;
  }
  const runButton = byId("fit-run", HTMLButtonElement);
  runButton.disabled = true;
  setStatus(`Running ${methodName(method).toLowerCase()}…`, "pending");
  setProgress(0);
  const started = performance.now();
  try {
    await runFit(method, {
      onStart: (job) => {
        state.job = job;
      },
      onProgress: (fraction) => setProgress(fraction),
    }, readOptions(method));
    const seconds = (performance.now() - started) / 1000;
    setStatus(`Done in ${seconds < 1 ? seconds.toFixed(2) : seconds.toFixed(1)} s; the result is the first card below.`, "ok");
  } catch (e) {
    if (e instanceof ApiError && e.status === 409) setStatus("Cancelled; nothing was kept.", "");
    else if (e instanceof ApiError && e.status === 429) {
      const wait = e.retryAfter;
      setStatus(`The server is busy with other fits${wait !== null ? `; try again in ${wait} s` : ""}.`, "error");
    } else setStatus(`The fit failed: ${e instanceof Error ? e.message : String(e)}`, "error");
  } finally {
    state.job = null;
    setProgress(null);
    runButton.disabled = false;
  }
}

/**
 * Which view shows a method's result best.
 * @param {FitResult} fit
 * @returns {import("./views.js").ViewName | null}
 */
function viewFor(fit) {
  const overlay = /** @type {Record<string, unknown>} */ (fit.overlay ?? {});
  if (fit.method === "collapse") return "collapse";
  // The tail's fitted law is drawn on the autocorrelation (from the server's
  // curve, or from its two parameters; see views.js).
  if (fit.method === "tail") return "auto";
  if (overlay.profile) return "slices";
  if (overlay.tail) return "auto";
  if (overlay.residual) return "residual";
  return null;
}

/**
 * A table of the fitted parameters: each value with its error from the fit,
 * and the bootstrap error beneath when the server ran one.
 * @param {FitResult} fit
 * @returns {HTMLElement}
 */
function parameterTable(fit) {
  const names = parameterOrder(fit);
  const shown = state.detail;
  const d = shown !== null && String(shown.id) === String(fit.dataset) ? shown : null;
  const head = h("tr", {}, [h("th", { scope: "col" }, ["Parameter"]), h("th", { scope: "col" }, ["Value ± error"])]);
  const rows = names.map((name) => {
    const p = fit.parameters[name];
    const [symbol, generic] = parameterText(name);
    const meaning = name === "D" && d !== null ? `transport coefficient, ${dUnit(d)}` : generic;
    if (!p) return h("tr", {}, []);
    const boot = /** @type {{fixed?: boolean}} */ (p).fixed ? null : p.err_bootstrap;
    return h("tr", { "data-parameter": name }, [
      h("th", { scope: "row", title: meaning }, [symbol, meaning ? h("span", { class: "param-meaning" }, [meaning]) : ""]),
      h("td", { class: "num" }, [
        h("span", { class: "param-value" }, [parameterValue(p)]),
        ...(boot !== null && boot !== undefined
          ? [h("span", { class: "param-boot", title: "one-sigma error from resampling" }, [`bootstrap ± ${errText(boot)}`])]
          : []),
        ...windowErrorText(p, fit),
      ]),
    ]);
  });
  return h("table", { class: "param-table" }, [h("thead", {}, [head]), h("tbody", {}, rows)]);
}

/**
 * The window error and the bootstrap count under a parameter (stat ± window).
 * @param {import("./api.js").FitParameter} p
 * @param {FitResult} fit
 * @returns {HTMLElement[]}
 */
function windowErrorText(p, fit) {
  if (p.fixed) return [h("span", { class: "param-boot" }, ["fixed by the model"])];
  if (p.err_sys === null || p.err_sys === undefined) return [];
  const n = fit.bootstrap ?? 0;
  return [h("span", { class: "param-boot", title: fit.window_rule ?? "" }, [`(stat, ${n} resamples) ± ${errText(p.err_sys)} (window)`])];
}

/**
 * One value of a report in words: numbers rounded, identifiers named, a
 * scan summarised by its range and its best point, a pair as an interval.
 * @param {string} key
 * @param {unknown} value
 * @returns {string | null} null for values with nothing to say
 */
function reportValue(key, value) {
  if (typeof value === "number") return formatNumber(value);
  if (typeof value === "string" || typeof value === "boolean") return valueWords(value);
  if (Array.isArray(value)) {
    const numbers = value.every((v) => typeof v === "number");
    if (numbers && value.length === 2) return `${formatNumber(value[0])} … ${formatNumber(value[1])}`;
    const pairs = value.every((v) => Array.isArray(v) && v.length >= 2 && typeof v[0] === "number" && typeof v[1] === "number");
    if (pairs && value.length > 0) {
      const first = /** @type {number[]} */ (value[0]);
      const last = /** @type {number[]} */ (value[value.length - 1]);
      const best = /** @type {number[][]} */ (value).reduce((a, b) => ((b[1] ?? Infinity) < (a[1] ?? Infinity) ? b : a));
      const name = key === "z_scan" ? "z" : "x";
      return `${value.length} values of ${name} from ${formatNumber(first[0] ?? NaN)} to ${formatNumber(last[0] ?? NaN)}; lowest ${formatNumber(best[1] ?? NaN)} at ${name} = ${formatNumber(best[0] ?? NaN)}`;
    }
    if (numbers && value.length > 0) return `${value.length} values from ${formatNumber(Math.min(...value))} to ${formatNumber(Math.max(...value))}`;
    return null;
  }
  if (value && typeof value === "object") {
    const parts = Object.entries(value)
      .filter(([, v]) => typeof v === "number" || typeof v === "string" || typeof v === "boolean")
      .slice(0, 6)
      .map(([k, v]) => `${reportName(k)} ${typeof v === "number" ? formatNumber(v) : valueWords(/** @type {string | boolean} */ (v))}`);
    return parts.length > 0 ? parts.join(", ") : null;
  }
  return null;
}

/**
 * Method-specific detail of a report, shown folded: scalars as a list,
 * arrays by their length; the local exponent of the tail fit as a table.
 * @param {FitResult} fit
 * @returns {HTMLElement | null}
 */
function reportDetails(fit) {
  const report = fit.report ?? {};
  const items = [];
  for (const [key, value] of Object.entries(report)) {
    if (key === "local_exponent" && Array.isArray(value)) continue;
    const text = reportValue(key, value);
    if (text === null) continue;
    items.push(h("div", { class: "fact" }, [h("dt", {}, [reportName(key)]), h("dd", {}, [text])]));
  }
  const children = [];
  if (items.length > 0) children.push(h("dl", { class: "facts facts-more" }, items));
  const local = report.local_exponent;
  if (Array.isArray(local) && local.length > 0) {
    children.push(
      h("p", { class: "small" }, ["Local exponent z(t) from successive points:"]),
      h("table", { class: "param-table small-table" }, [
        h("thead", {}, [h("tr", {}, [h("th", {}, ["t"]), h("th", {}, ["z(t)"])])]),
        h("tbody", {}, local.slice(0, 40).map((/** @type {any} */ p) => h("tr", {}, [h("td", { class: "num" }, [formatNumber(Number(p.t))]), h("td", { class: "num" }, [withError(Number(p.value), p.err ?? null)])]))),
      ]),
    );
  }
  if (children.length === 0) return null;
  return h("details", { class: "report-details" }, [h("summary", {}, ["More from the server"]), ...children]);
}

/**
 * Renders one result as a card at the top of the results list.
 * @param {FitResult} fit
 */
function addCard(fit) {
  const list = byId("fit-results", HTMLElement);
  state.cards += 1;
  const n = state.cards;
  const d = state.detail;
  const datasetName = d !== null && String(d.id) === String(fit.dataset) ? d.name : `dataset ${fit.dataset}`;
  const unit = d !== null && String(d.id) === String(fit.dataset) ? d.meta.time_unit : "";
  const termination = terminationText(fit.termination);
  const quality = qualityRows(fit.quality);
  const warnings = Array.isArray(fit.warnings) ? fit.warnings : [];
  const view = viewFor(fit);
  const actions = h("div", { class: "form-actions" }, []);
  if (view !== null) {
    const show = h("button", { type: "button", class: "btn btn-small" }, [view === "collapse" ? "Show the collapse" : view === "auto" ? "Show on the autocorrelation" : view === "slices" ? "Show on the slices" : "Show the residuals"]);
    show.addEventListener("click", () => activate(view));
    actions.append(show);
  }
  const card = h("article", { class: "fit-card", "data-method": fit.method, "data-testid": "fit-card", "aria-labelledby": `fit-card-${n}` }, [
    h("h3", { id: `fit-card-${n}` }, [methodName(fit.method), h("span", { class: "heading-sub" }, [` · ${datasetName}`])]),
    windowChipList(fit.windows, unit),
    parameterTable(fit),
    quality.length > 0
      ? h("dl", { class: "facts quality-facts" }, quality.map(([label, value, hint]) => h("div", { class: "fact", ...(hint ? { title: hint } : {}) }, [h("dt", {}, [label]), h("dd", {}, [value])])))
      : h("p", { class: "small muted" }, ["No quality figure reported."]),
    h("p", { class: `small termination${termination.worry ? " is-worry" : ""}` }, [h("strong", {}, ["Stopped: "]), termination.text]),
    ...(warnings.length > 0 ? [h("ul", { class: "warnings", "aria-label": "Warnings" }, warnings.map((w) => h("li", {}, [w])))] : []),
    h("p", { class: "small muted provenance" }, [
      `Seed ${fit.seed ?? "none"} · ${fit.program_version ?? ""} · data ${String(fit.dataset_hash ?? "").slice(0, 12)}…`,
    ]),
    ...(reportDetails(fit) ? [/** @type {HTMLElement} */ (reportDetails(fit))] : []),
    actions,
  ]);
  if (state.canEdit) {
    const pinButton = h("button", { type: "button", class: "btn btn-small btn-primary", "data-testid": "pin-open", "aria-expanded": "false" }, ["Pin to log…"]);
    /** @type {HTMLFormElement | null} */
    let form = null;
    pinButton.addEventListener("click", () => {
      if (form !== null) {
        form.remove();
        form = null;
        pinButton.setAttribute("aria-expanded", "false");
        return;
      }
      form = pinForm({
        submitLabel: "Pin",
        commentLabel: "Comment (what it means, what to check)",
        placeholder: "e.g. tail window chosen by eye; compare with run 15",
        testid: "pin-form",
        onSubmit: async (author, comment) => {
          const api = state.api;
          if (api === null) throw new Error("no session");
          const entry = await api.pin({ author, comment, dataset: fit.dataset, fit });
          pinButton.textContent = `Pinned as #${entry.id}`;
          pinButton.disabled = true;
          emit("log", { reconnected: false });
          window.setTimeout(() => {
            form?.remove();
            form = null;
          }, 1500);
          return `Pinned as entry #${entry.id}; everyone with the link sees it now.`;
        },
        onCancel: () => {
          form?.remove();
          form = null;
          pinButton.setAttribute("aria-expanded", "false");
          pinButton.focus();
        },
      });
      pinButton.setAttribute("aria-expanded", "true");
      card.append(form);
      form.querySelector("textarea")?.focus();
    });
    actions.prepend(pinButton);
  }
  card.title = fitSummary(fit);
  list.prepend(card);
  while (list.children.length > MAX_CARDS) list.lastElementChild?.remove();
}

/**
 * Wires the panel.
 * @param {SessionApi} api
 * @param {boolean} canEdit
 */
export function wireFits(api, canEdit) {
  state.api = api;
  state.canEdit = canEdit;
  renderMethods();
  byId("fit-run", HTMLButtonElement).addEventListener("click", () => void run(chosenMethod()));
  byId("fit-cancel", HTMLButtonElement).addEventListener("click", () => {
    if (state.job !== null) {
      cancelFit(state.job);
      setStatus("Cancelling…", "pending");
    }
  });
  on("dataset", (detail) => {
    state.detail = detail;
    byId("fit-dataset-name", HTMLElement).textContent = detail === null ? "" : `“${detail.name}”`;
    byId("fit-run", HTMLButtonElement).disabled = detail === null;
  });
  // Every finished fit leaves a card, also a best fit started from the
  // collapse view.
  on("fit", addCard);
}
