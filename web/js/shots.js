// Shot-record datasets: the upload of a shot file with the estimator's
// settings (one source site or a bulk window, readout flips given or
// calibrated from t = 0, symmetrising, renormalising), and the
// site-resolved view of a dataset made from shots: C_ij(t) for a chosen
// source j as a map, and its sum over i with the times the server flags as
// departing from 1. Every number drawn comes from the server. Knows api.js,
// the bus, views.js and plot.js; knows nothing about the other views.

import { ApiError, guessShotFormat, nameFromFile } from "./api.js";
import { on } from "./bus.js";
import { clearProblems, showProblems } from "./datasets.js";
import { byId, h } from "./dom.js";
import { clearPlot, drawSiteMap, drawSiteSumRule, fitToContainer } from "./plot.js";
import { activate, activeView, drawFailed, isVisible, note, registerView } from "./views.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */
/** @typedef {import("./api.js").DatasetSummary} DatasetSummary */
/** @typedef {import("./api.js").ShotOptions} ShotOptions */
/** @typedef {import("./api.js").ShotView} ShotView */

/**
 * Whether a dataset was estimated from shot records (its format is
 * `shots-csv`, `shots-npz` or `shots-h5`).
 * @param {{format: string} | null} d
 * @returns {boolean}
 */
export function isShotDataset(d) {
  return d !== null && d.format.startsWith("shots-");
}

/**
 * Reads the estimator settings from the upload form. A malformed field is
 * reported by its label, before anything is sent.
 * @returns {ShotOptions | string} the options, or what is wrong
 */
function readShotOptions() {
  /** @type {ShotOptions} */
  const options = {};
  const bulk = byId("shots-bulk-on", HTMLInputElement).checked;
  if (bulk) {
    const text = byId("shots-bulk", HTMLInputElement).value.trim();
    if (text !== "") {
      if (!/^\d+\s*:\s*\d+$/.test(text)) return `Bulk sites A:B: “${text}” is not two site numbers joined by a colon.`;
      options.bulk = text.replace(/\s+/g, "");
    }
  } else {
    const text = byId("shots-source", HTMLInputElement).value.trim();
    if (text !== "") {
      const j = Number(text);
      if (!Number.isInteger(j) || j < 0) return `Source site j: “${text}” is not a site number (0, 1, 2, …).`;
      options.source = j;
    }
  }
  const readout = byId("shots-readout", HTMLInputElement).value.trim();
  if (readout !== "") {
    const parts = readout.split(",").map((p) => Number(p.trim()));
    if (parts.length !== 2 || parts.some((p) => !Number.isFinite(p) || p < 0 || p > 1)) {
      return `Readout flips p01,p10: “${readout}” is not two probabilities separated by a comma.`;
    }
    options.readout = parts.join(",");
  }
  if (byId("shots-t0", HTMLInputElement).checked) options.readout_from_t0 = true;
  if (byId("shots-symmetrise", HTMLInputElement).checked) options.symmetrise = true;
  if (byId("shots-renormalise", HTMLInputElement).checked) options.renormalise = true;
  return options;
}

/**
 * Wires the shot-file picker of the upload box (edit links only).
 * @param {SessionApi} api
 * @param {(summary: DatasetSummary) => void} onAdded called after the server accepted a file
 */
export function wireShotUpload(api, onAdded) {
  const input = byId("shots-input", HTMLInputElement);
  const status = byId("shots-status", HTMLElement);
  const source = byId("shots-source", HTMLInputElement);
  const bulk = byId("shots-bulk", HTMLInputElement);
  for (const radio of document.querySelectorAll('input[name="shots-window"]')) {
    radio.addEventListener("change", () => {
      const isBulk = byId("shots-bulk-on", HTMLInputElement).checked;
      bulk.disabled = !isBulk;
      source.disabled = isBulk;
    });
  }

  input.addEventListener("change", async () => {
    const file = input.files?.[0];
    if (!file) return;
    clearProblems();
    status.dataset.kind = "";
    try {
      const format = guessShotFormat(file.name);
      if (format === null) {
        showProblems(file.name, "Its extension does not name a shot-record format: use .csv, .npz or .h5.", []);
        status.textContent = "";
        return;
      }
      const options = readShotOptions();
      if (typeof options === "string") {
        showProblems(file.name, options, []);
        status.textContent = "";
        return;
      }
      status.textContent = `Sending ${file.name} as shot records (${format.toUpperCase()})…`;
      const summary = await api.uploadShots(nameFromFile(file.name), format, file, options);
      status.textContent = `Added “${summary.name}” from shot records: ${summary.sites} sites × ${summary.times} times.`;
      status.dataset.kind = "ok";
      onAdded(summary);
    } catch (e) {
      status.textContent = "";
      status.dataset.kind = "error";
      if (e instanceof ApiError) showProblems(file.name, e.status === 403 ? `This link is view-only (${e.message}).` : e.message, e.problems);
      else showProblems(file.name, String(e), []);
    } finally {
      input.value = "";
    }
  });
}

const state = {
  /** @type {DatasetDetail | null} */
  detail: null,
  /** @type {ShotView | null} */
  view: null,
  /** The source asked for; null until the server named its default. @type {number | null} */
  source: null,
  /** Counts requests so that a slow, stale answer never overwrites a newer one. */
  seq: 0,
};

/** @returns {HTMLElement[]} */
function figures() {
  return [byId("view-sites", HTMLElement), byId("view-sites-sum", HTMLElement)];
}

/**
 * Clears both figures and says why, or clears the sentence.
 * @param {string | null} message
 */
function sitesNote(message) {
  note("sites", message);
  if (message !== null) {
    byId("sites-warnings", HTMLElement).replaceChildren();
    byId("caption-sites", HTMLElement).textContent = "";
    // note() clears the first figure; the sum rule beside it goes too.
    clearPlot(byId("view-sites-sum", HTMLElement));
  }
}

function fillSources() {
  const select = byId("sites-source", HTMLSelectElement);
  const n = state.view?.sites ?? state.detail?.sites ?? 0;
  select.replaceChildren(...Array.from({ length: n }, (_, j) => h("option", { value: String(j) }, [`j = ${j}`])));
  select.disabled = n === 0;
  if (state.source !== null) select.value = String(state.source);
}

function draw() {
  if (!isVisible("sites")) return;
  const d = state.detail;
  if (!isShotDataset(d)) {
    sitesNote("This dataset was not made from shot records, so there is no site-resolved view. Add a shot file under “Shot records instead” on the left.");
    return;
  }
  const v = state.view;
  if (v === null) return;
  if (v.times.length === 0 || v.sites === 0) {
    sitesNote("The server returned no site-resolved values for this source.");
    return;
  }
  note("sites", null);
  const timeUnit = d?.meta.time_unit ?? "";
  const shots = v.shots_per_time.reduce((a, b) => a + b, 0);
  const states = v.states_per_time.reduce((a, b) => a + b, 0);
  const departing = v.sum_rule.filter((p) => p.departs).length;
  byId("caption-sites", HTMLElement).textContent =
    `Source j = ${v.source}; ${shots} shots from ${states} initial states over ${v.times.length} times. ` +
    (departing === 0 ? "The sum stays at 1 within its error at every time." : `The sum departs from 1 at ${departing} time${departing === 1 ? "" : "s"}.`);
  byId("sites-warnings", HTMLElement).replaceChildren(...v.warnings.map((w) => h("li", {}, [w])));
  const revision = `${d?.id}|${d?.content_hash}|${v.source}`;
  const [map, sum] = figures();
  if (!map || !sum) return;
  drawSiteMap(map, {
    sites: Array.from({ length: v.sites }, (_, i) => i),
    t: v.times,
    C: v.C,
    source: v.source,
    timeUnit,
    revision,
  }).catch((e) => drawFailed("sites", e));
  drawSiteSumRule(sum, { points: v.sum_rule, source: v.source, timeUnit, revision }).catch((e) => drawFailed("sites", e));
}

/**
 * Asks the server for the site-resolved correlations of one source.
 * @param {SessionApi} api
 * @param {number | null} source null: the server's default
 */
async function load(api, source) {
  const d = state.detail;
  if (!isShotDataset(d) || d === null) return;
  const seq = ++state.seq;
  byId("caption-sites", HTMLElement).textContent = "Loading the site-resolved correlations…";
  try {
    const v = await api.shots(d.id, source);
    if (seq !== state.seq) return;
    // Asked without a source, the server answers for its default site; the
    // view opens on the source the dataset was estimated for, when it names one.
    const madeFor = v.options.source;
    if (source === null && typeof madeFor === "number" && Number.isInteger(madeFor) && madeFor !== v.source) {
      await load(api, madeFor);
      return;
    }
    state.view = v;
    state.source = v.source;
    fillSources();
    draw();
  } catch (e) {
    if (seq !== state.seq) return;
    state.view = null;
    if (isVisible("sites")) sitesNote(`The site-resolved correlations could not be loaded: ${e instanceof Error ? e.message : String(e)}`);
  }
}

/**
 * Wires the site-resolved view: it follows the chosen dataset and its own
 * source selector.
 * @param {SessionApi} api
 */
export function wireSiteView(api) {
  registerView("sites", {
    shown: () => {
      draw();
      for (const el of figures()) fitToContainer(el);
    },
    figures,
  });
  const tab = byId("tab-sites", HTMLButtonElement);
  const select = byId("sites-source", HTMLSelectElement);
  select.addEventListener("change", () => {
    const j = Number(select.value);
    if (Number.isInteger(j)) void load(api, j);
  });
  on("dataset", (d) => {
    const same = d !== null && state.detail !== null && String(d.id) === String(state.detail.id) && d.content_hash === state.detail.content_hash;
    state.detail = d;
    const shots = isShotDataset(d);
    tab.hidden = !shots;
    if (!shots) {
      state.view = null;
      state.source = null;
      fillSources();
      if (activeView() === "sites") activate("map");
      return;
    }
    if (same && state.view !== null) {
      draw();
      return;
    }
    state.view = null;
    state.source = d?.meta.source_site ?? null;
    fillSources();
    void load(api, state.source);
  });
}
