// Entry point of the dashboard page `/s/{token}`. Owns the page's state (the
// session, the dataset list, which dataset is chosen), the large-text
// setting and the live event stream, and wires the other modules together:
// api.js for the server, header.js, desk.js, datasets.js, metaform.js,
// windows.js, views.js, collapse.js, residuals.js, compare.js, shots.js,
// couplings.js, fits.js, theory.js, log.js and present.js for the page. Live updates arrive as server-sent
// events; after a dropped stream reconnects, everything is read again.

import { ApiError, SessionApi, tokenFromLocation } from "./api.js";
import { emit } from "./bus.js";
import { wireCollapse } from "./collapse.js";
import { wireCompare } from "./compare.js";
import { wireCouplings } from "./couplings.js";
import { byId, h } from "./dom.js";
import { couplingLabel, renderDatasetList, sourceLabel, wireUpload } from "./datasets.js";
import { wireDesk } from "./desk.js";
import { wireFitRunner } from "./fitrunner.js";
import { wireFits } from "./fits.js";
import { renderSession, setLiveState, wireCopyButtons } from "./header.js";
import { wireLog } from "./log.js";
import { fillMetaForm, wireMetaForm } from "./metaform.js";
import { formatNumber } from "./format.js";
import { loadPlotting } from "./plot.js";
import { largeText, setLargeText } from "./prefs.js";
import { applyTextScale, wirePresentation } from "./present.js";
import { wireResiduals } from "./residuals.js";
import { wireShotUpload, wireSiteView } from "./shots.js";
import { wireTheory } from "./theory.js";
import { readViewState, writeViewState } from "./urlstate.js";
import { VIEW_NAMES, activate, activeView, showDataset, showNothing, wireViews } from "./views.js";
import { initWindows, setDefaultWindows, setWindowTimeUnit, wireWindows } from "./windows.js";
import { showVerdictFor } from "./verdict.js";
import { noteWords } from "./words.js";

/** @typedef {import("./api.js").DatasetSummary} DatasetSummary */
/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */

const app = {
  /** @type {SessionApi | null} */
  api: null,
  canEdit: false,
  /** @type {DatasetSummary[]} */
  datasets: [],
  /** @type {string | null} */
  selectedId: null,
  /** Counts detail requests so that a slow, stale answer never overwrites a newer one. */
  loadSeq: 0,
  /**
   * The first dataset's detail, asked for while the page was still loading.
   * @type {{id: string, detail: Promise<DatasetDetail>} | null}
   */
  early: null,
};

/**
 * Shows a message that stops the page from working, in plain words.
 * @param {string} message
 */
function fatal(message) {
  const box = byId("fatal", HTMLElement);
  box.textContent = message;
  box.hidden = false;
}

/**
 * @param {unknown} e
 * @returns {string}
 */
function describe(e) {
  return e instanceof Error ? e.message : String(e);
}

/** The dataset named in the address (`#dataset=ID`), if any. */
function idFromHash() {
  return readViewState().dataset;
}

/**
 * Puts the chosen dataset in the address so a copied link opens on it; a
 * change of dataset is a step in the browser's history.
 * @param {string} id
 * @param {boolean} push
 */
function writeHash(id, push) {
  writeViewState({ dataset: id }, { push });
}

/**
 * Switches large lettering on or off, for the page and the plots.
 * @param {boolean} on
 */
function applyLargeText(on) {
  document.documentElement.classList.toggle("large-text", on);
  const button = byId("large-text", HTMLButtonElement);
  button.setAttribute("aria-pressed", on ? "true" : "false");
  applyTextScale(on);
}

function wireLargeText() {
  applyLargeText(largeText());
  byId("large-text", HTMLButtonElement).addEventListener("click", () => {
    const on = !document.documentElement.classList.contains("large-text");
    setLargeText(on);
    applyLargeText(on);
    emit("textscale", on ? 1.3 : 1);
  });
}

/**
 * Renders term–value pairs into a description list.
 * @param {string} id the list's element id
 * @param {Array<[string, string, string?]>} rows term, value, optional tooltip
 */
function renderPairs(id, rows) {
  byId(id, HTMLElement).replaceChildren(
    ...rows.map(([term, value, title]) =>
      h("div", { class: "fact" }, [h("dt", {}, [term]), h("dd", title ? { title } : {}, [value])]),
    ),
  );
}

/**
 * Shows what the server says about the chosen dataset: the few facts needed
 * to read the plots in the title row, provenance and metadata folded below.
 * @param {DatasetDetail} d
 */
function renderFacts(d) {
  byId("dataset-title", HTMLElement).textContent = d.name;
  byId("dataset-more", HTMLElement).hidden = false;
  const unit = d.meta.time_unit ? ` ${d.meta.time_unit}` : " (unit not set)";
  renderPairs("dataset-facts", [
    ["grid", `${d.sites} × ${d.times}`, `${d.sites} sites × ${d.times} times`],
    ["x", `${d.x_range[0]} … ${d.x_range[1]}`, "sites"],
    ["t", `${formatNumber(d.t_range[0])} … ${formatNumber(d.t_range[1])}${unit}`],
    ["Σₓ C", `${formatNumber(d.sum_rule_range[0])} … ${formatNumber(d.sum_rule_range[1])}`, "range of the sum over sites; 1 when nothing is lost"],
    ["errors", d.has_errors ? "yes" : "none"],
    ["missing", d.missing === 0 ? "none" : String(d.missing)],
  ]);
  renderPairs("dataset-more-facts", [
    ["Platform", d.meta.platform || "not set"],
    ["Couplings", couplingLabel(d.meta)],
    ["Chain", d.meta.chain_length === null ? "length not set" : `${d.meta.chain_length} sites`],
    ["Source", sourceLabel(d.meta)],
    ["Origin", d.meta.synthetic ? "synthetic (model)" : "measured"],
    ["File format", d.format.toUpperCase()],
    ["Content hash", d.content_hash.slice(0, 16) + "…", d.content_hash],
    ["Added", d.created_at],
  ]);
  byId("dataset-notes", HTMLElement).replaceChildren(...d.notes.map((n) => h("li", {}, [noteWords(n)])));
  const userNotes = byId("dataset-user-notes", HTMLElement);
  userNotes.textContent = d.meta.notes ? `Notes: ${d.meta.notes}` : "";
  userNotes.hidden = !d.meta.notes;
}

function renderList() {
  renderDatasetList(app.datasets, app.selectedId, (id) => void select(id));
}

/**
 * Chooses a dataset and loads its arrays. `history: false` is for a choice
 * that comes from the address itself (Back, Forward, an edited fragment).
 * @param {string} id
 * @param {{history?: boolean}} [options]
 */
async function select(id, options = {}) {
  const api = app.api;
  if (api === null) return;
  const changed = app.selectedId !== id;
  const hadOne = app.selectedId !== null;
  app.selectedId = id;
  writeHash(id, changed && hadOne && options.history !== false);
  renderList();
  byId("meta-panel", HTMLElement).hidden = !app.canEdit;
  const seq = ++app.loadSeq;
  const early = app.early;
  app.early = null;
  try {
    const detail = await (early !== null && early.id === id ? early.detail : api.dataset(id));
    if (seq !== app.loadSeq) return;
    renderFacts(detail);
    setWindowTimeUnit(detail.meta.time_unit);
    setDefaultWindows(detail.default_windows ?? null);
    showVerdictFor(api, detail);
    if (app.canEdit) {
      byId("meta-dataset-name", HTMLElement).textContent = `of “${detail.name}”`;
      fillMetaForm(detail.meta, { force: changed });
    }
    showDataset(detail);
  } catch (e) {
    if (seq !== app.loadSeq) return;
    byId("dataset-title", HTMLElement).textContent = `Could not load the dataset: ${describe(e)}`;
  }
}

/**
 * The dataset the page opens on: the one the address names, else the first.
 * @param {string[]} ids
 * @returns {string | null}
 */
function firstChoice(ids) {
  const wanted = idFromHash();
  return wanted !== null && ids.includes(wanted) ? wanted : (ids[0] ?? null);
}

/**
 * Reloads the dataset list and keeps (or makes) a selection.
 * @param {Promise<DatasetSummary[]>} [asked] the list, when already asked for
 */
async function refreshList(asked) {
  const api = app.api;
  if (api === null) return;
  try {
    app.datasets = await (asked ?? api.datasets());
  } catch (e) {
    fatal(`Could not load the datasets: ${describe(e)}`);
    return;
  }
  const ids = app.datasets.map((d) => String(d.id));
  if (app.selectedId !== null && ids.includes(app.selectedId)) {
    renderList();
    return;
  }
  const first = firstChoice(ids);
  if (first === null) {
    app.selectedId = null;
    renderList();
    byId("meta-panel", HTMLElement).hidden = true;
    byId("dataset-more", HTMLElement).hidden = true;
    byId("dataset-title", HTMLElement).textContent = "No datasets yet";
    showNothing(
      app.canEdit
        ? "This session has no datasets yet: add a correlation map on the left."
        : "This session has no datasets yet. They appear here as soon as someone adds one.",
    );
    return;
  }
  await select(first);
}

/** Follows the session's event stream; EventSource reconnects by itself. */
function followEvents() {
  const api = app.api;
  if (api === null || typeof EventSource === "undefined") return;
  const source = new EventSource(api.eventsUrl());
  let missedEvents = false;
  source.addEventListener("open", () => {
    setLiveState("live");
    // Changes made while the stream was down sent no events here; catch up.
    if (missedEvents) {
      missedEvents = false;
      void refreshList();
      if (app.selectedId !== null) void select(app.selectedId);
      emit("log", { reconnected: true });
    }
  });
  source.addEventListener("error", () => {
    missedEvents = true;
    setLiveState("reconnecting");
  });
  source.addEventListener("message", (ev) => {
    /** @type {import("./api.js").ServerEvent} */
    let event;
    try {
      event = JSON.parse(ev.data);
    } catch {
      return;
    }
    if (event.kind === "dataset-added") {
      void refreshList();
    } else if (event.kind === "dataset-updated") {
      void refreshList();
      if (event.id !== undefined && String(event.id) === app.selectedId) void select(app.selectedId);
    } else if (event.kind === "log-added") {
      emit("log", { reconnected: false });
    } else if (event.kind === "job-progress" && typeof event.job === "string" && typeof event.fraction === "number") {
      emit("progress", { job: event.job, fraction: event.fraction });
    }
  });
}

/**
 * Steps to the next or previous dataset of the list (presentation keys).
 * @param {number} step
 */
function stepDataset(step) {
  const ids = app.datasets.map((d) => String(d.id));
  if (ids.length === 0) return;
  const i = app.selectedId === null ? -1 : ids.indexOf(app.selectedId);
  const next = ids[(i + step + ids.length) % ids.length];
  if (next !== undefined) void select(next);
}

/**
 * Brings the page to what the address says, after Back, Forward or an
 * edited fragment, without reloading.
 */
function followAddress() {
  const wanted = readViewState();
  const ids = app.datasets.map((d) => String(d.id));
  if (wanted.dataset !== null && wanted.dataset !== app.selectedId && ids.includes(wanted.dataset)) {
    void select(wanted.dataset, { history: false });
  }
  const view = VIEW_NAMES.find((v) => v === wanted.view);
  if (view !== undefined && view !== activeView()) activate(view, { history: false });
}

async function main() {
  // Everything a first figure needs is asked for at once: the plotting
  // library, the session, the dataset list and the first dataset; the
  // library is waited for only before anything is drawn.
  const plotting = loadPlotting();
  const token = tokenFromLocation(window.location);
  const api = new SessionApi(token);
  app.api = api;
  const asked = { session: api.session(), datasets: api.datasets() };
  // Their failures are reported where they are awaited, below.
  asked.datasets
    .then((list) => {
      const first = firstChoice(list.map((d) => String(d.id)));
      if (first !== null && app.selectedId === null) app.early = { id: first, detail: api.dataset(first) };
      app.early?.detail.catch(() => undefined);
    })
    .catch(() => undefined);
  const initial = readViewState();
  wireCopyButtons();
  wireLargeText();
  wireDesk();
  initWindows({ t_min: initial.t_min, t_max: initial.t_max, x_max: initial.x_max });
  wireWindows();
  wireViews();
  wirePresentation({ stepDataset });
  try {
    const session = await asked.session;
    renderSession(session);
    app.canEdit = session.can_edit;
  } catch (e) {
    byId("session-name", HTMLElement).textContent = "Session not available";
    byId("layout", HTMLElement).hidden = true;
    if (e instanceof ApiError && e.status === 404) {
      fatal("This link does not open any session on this server. Ask for a fresh link.");
    } else {
      fatal(`Could not load the session: ${describe(e)}`);
    }
    setLiveState("offline");
    return;
  }
  byId("upload-panel", HTMLElement).hidden = !app.canEdit;
  document.body.dataset.access = app.canEdit ? "edit" : "view";
  try {
    await plotting;
  } catch (e) {
    fatal(`No plot can be drawn: ${describe(e)}. Reload the page; if it persists, the server's assets are incomplete.`);
  }
  wireFitRunner(api);
  wireCollapse(api, { z: initial.z, D: initial.D });
  wireResiduals();
  wireCompare(api);
  wireSiteView(api);
  wireCouplings(api);
  wireFits(api, app.canEdit);
  wireTheory(api);
  wireLog(api, app.canEdit);
  const view = VIEW_NAMES.find((v) => v === initial.view);
  if (view !== undefined) activate(view, { history: false });
  if (app.canEdit) {
    wireUpload(api, (summary) => {
      void refreshList().then(() => select(String(summary.id)));
    });
    wireShotUpload(api, (summary) => {
      void refreshList().then(() => select(String(summary.id)));
    });
    wireMetaForm(api, () => app.selectedId, () => {
      void refreshList();
      if (app.selectedId !== null) void select(app.selectedId);
    });
  }
  followEvents();
  await refreshList(asked.datasets);
  // Back and Forward between pushed entries fire popstate; a fragment typed
  // into the address bar fires hashchange. Both lead to the same place.
  window.addEventListener("popstate", followAddress);
  window.addEventListener("hashchange", followAddress);
}

void main();
