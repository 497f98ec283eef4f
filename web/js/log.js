// The session log panel: every pinned entry, newest first, with its
// provenance (dataset and content hash, method, windows, parameters with
// errors, quality, seed, program version, author, time, comment);
// retractions as entries of their own, the entries they withdraw struck
// through with a link between the two; the note and retract forms; the
// download links. Re-reads the log whenever the bus says it may have changed
// (a live event, a reconnect, a pin from this page). Knows nothing about
// plotting.

import { emit, on } from "./bus.js";
import { noteUnread } from "./desk.js";
import { byId, h } from "./dom.js";
import { fitSummary, qualityRows, terminationText } from "./fitformat.js";
import { pinForm, wireAuthorLine } from "./pinform.js";
import { windowChipList } from "./windows.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").LogEntry} LogEntry */

const state = {
  /** @type {SessionApi | null} */
  api: null,
  canEdit: false,
  /** @type {LogEntry[]} */
  entries: [],
  /** Ids already shown, to tell new entries apart. @type {Set<number> | null} */
  seen: null,
  /** Counts reads so that a slow, stale answer never overwrites a newer one. */
  seq: 0,
  /** Entries whose retract form is open, kept open across re-renders. @type {Set<number>} */
  retracting: new Set(),
};

/**
 * A time stamp in the reader's own time: the clock time for today, the date
 * and time otherwise.
 * @param {string} iso
 * @returns {string}
 */
export function localTime(iso) {
  const d = new Date(iso);
  if (Number.isNaN(d.getTime())) return iso;
  const today = new Date();
  const time = d.toLocaleTimeString([], { hour: "2-digit", minute: "2-digit" });
  return d.toDateString() === today.toDateString() ? time : `${d.toLocaleDateString()} ${time}`;
}

/**
 * A link that scrolls to another entry without touching the address
 * fragment (which holds the view).
 * @param {number} id
 * @returns {HTMLAnchorElement}
 */
function entryLink(id) {
  const a = h("a", { href: `#log-entry-${id}`, class: "entry-link" }, [`#${id}`]);
  a.addEventListener("click", (ev) => {
    ev.preventDefault();
    const target = document.getElementById(`log-entry-${id}`);
    if (target) {
      target.scrollIntoView({ block: "center" });
      target.focus();
    }
  });
  return a;
}

/**
 * @param {LogEntry} entry
 * @param {Map<number, LogEntry>} retractedBy
 * @param {Set<number>} fresh
 * @returns {HTMLLIElement}
 */
function renderEntry(entry, retractedBy, fresh) {
  const withdrawnBy = retractedBy.get(entry.id) ?? null;
  const classes = ["log-entry"];
  if (withdrawnBy) classes.push("is-retracted");
  if (entry.retracts !== null) classes.push("is-retraction");
  if (fresh.has(entry.id)) classes.push("is-new");
  const fit = entry.fit && typeof entry.fit === "object" ? entry.fit : null;
  const li = h("li", { class: classes.join(" "), id: `log-entry-${entry.id}`, tabindex: "-1", "data-entry-id": String(entry.id), "data-testid": "log-entry" }, []);
  li.append(
    h("p", { class: "log-head" }, [
      h("span", { class: "log-id" }, [`#${entry.id}`]),
      h("span", { title: entry.created_at }, [localTime(entry.created_at)]),
      h("span", { class: "log-author" }, [entry.author]),
      ...(withdrawnBy ? [h("span", { class: "badge badge-retracted" }, ["withdrawn"])] : []),
    ]),
  );
  if (entry.retracts !== null) {
    li.append(h("p", { class: "log-retracts" }, ["Withdraws ", entryLink(entry.retracts)]));
  }
  const body = h("div", { class: "log-body" }, []);
  if (fit) {
    body.append(h("p", { class: "log-fit" }, [fitSummary(fit)]));
    const quality = qualityRows(fit.quality).slice(0, 3).map(([label, value]) => `${label} ${value}`);
    if (quality.length > 0) body.append(h("p", { class: "log-quality small" }, [quality.join(" · ")]));
    body.append(windowChipList(fit.windows));
  }
  if (entry.dataset_name) body.append(h("p", { class: "log-dataset small" }, ["on ", h("strong", {}, [entry.dataset_name])]));
  if (entry.comment) body.append(h("p", { class: "log-comment" }, [entry.comment]));
  li.append(body);
  if (withdrawnBy) {
    li.append(
      h("p", { class: "log-withdrawn small" }, [
        "Withdrawn by ",
        entryLink(withdrawnBy.id),
        ` (${withdrawnBy.author}, ${localTime(withdrawnBy.created_at)})${withdrawnBy.comment ? `: ${withdrawnBy.comment}` : ""}`,
      ]),
    );
  }
  const tables = fitTables(entry, fit);
  if (tables) li.append(tables);
  const provenance = [];
  if (entry.dataset_hash) provenance.push(["data hash", entry.dataset_hash.slice(0, 16) + "…", entry.dataset_hash]);
  if (fit) {
    provenance.push(["method", fit.method, ""]);
    provenance.push(["seed", String(fit.seed ?? "none"), ""]);
    provenance.push(["stopped", terminationText(fit.termination).text, ""]);
    if (Array.isArray(fit.warnings) && fit.warnings.length > 0) provenance.push(["warnings", fit.warnings.join(" · "), ""]);
  }
  provenance.push(["program", entry.program_version, ""]);
  provenance.push(["pinned", entry.created_at, ""]);
  li.append(
    h("details", { class: "log-provenance small" }, [
      h("summary", {}, ["Provenance"]),
      h("dl", { class: "facts facts-more" }, provenance.map(([term, value, title]) => h("div", { class: "fact" }, [h("dt", {}, [term ?? ""]), h("dd", title ? { title } : {}, [value ?? ""])]))),
    ]),
  );
  if (state.canEdit && entry.retracts === null && !withdrawnBy) {
    const button = h("button", { type: "button", class: "btn btn-small", "data-testid": "retract-open", "aria-expanded": "false" }, ["Retract…"]);
    const actions = h("div", { class: "form-actions log-actions" }, [button]);
    li.append(actions);
    const openForm = () => {
      state.retracting.add(entry.id);
      button.setAttribute("aria-expanded", "true");
      const form = pinForm({
        submitLabel: `Retract #${entry.id}`,
        commentLabel: "Why is it withdrawn?",
        placeholder: "e.g. wrong window: the early times are not yet in the tail",
        commentRequired: true,
        testid: "retract-form",
        onSubmit: async (author, comment) => {
          const api = state.api;
          if (api === null) throw new Error("no session");
          const made = await api.pin({ author, comment, retracts: entry.id });
          state.retracting.delete(entry.id);
          emit("log", { reconnected: false });
          return `Withdrawn by entry #${made.id}.`;
        },
        onCancel: () => {
          state.retracting.delete(entry.id);
          form.remove();
          button.hidden = false;
          button.setAttribute("aria-expanded", "false");
          button.focus();
        },
      });
      button.hidden = true;
      li.append(form);
      return form;
    };
    button.addEventListener("click", () => openForm().querySelector("textarea")?.focus());
    if (state.retracting.has(entry.id)) openForm();
  }
  return li;
}

/** A re-render waits while someone types in a form inside the list. */
let pending = false;

function render() {
  const list = byId("log-list", HTMLOListElement);
  if (document.activeElement instanceof HTMLTextAreaElement && list.contains(document.activeElement)) {
    // Someone is writing a retraction reason: do not pull the form from
    // under them; the fresh entries appear when they leave the field.
    pending = true;
    return;
  }
  pending = false;
  const entries = state.entries;
  /** @type {Map<number, LogEntry>} */
  const retractedBy = new Map();
  for (const e of entries) if (e.retracts !== null) retractedBy.set(e.retracts, e);
  const firstRead = state.seen === null;
  const seen = state.seen ?? new Set();
  /** @type {Set<number>} */
  const fresh = new Set();
  for (const e of entries) {
    if (!seen.has(e.id)) {
      if (!firstRead) fresh.add(e.id);
      seen.add(e.id);
    }
  }
  state.seen = seen;
  // Keep focus on the entry that had it (a re-render replaces the elements).
  const focused = document.activeElement instanceof HTMLElement ? document.activeElement.closest("li.log-entry")?.getAttribute("data-entry-id") : null;
  list.replaceChildren(...[...entries].reverse().map((e) => renderEntry(e, retractedBy, fresh)));
  byId("log-empty", HTMLElement).hidden = entries.length > 0;
  if (focused) document.getElementById(`log-entry-${focused}`)?.focus({ preventScroll: true });
  if (fresh.size > 0) noteUnread(fresh.size);
}

/**
 * Download links for a pinned fit's fitted curves and residual map (CSV),
 * when the fit drew any.
 * @param {LogEntry} entry
 * @param {any} fit
 * @returns {HTMLElement | null}
 */
function fitTables(entry, fit) {
  const api = state.api;
  const overlay = fit && typeof fit.overlay === "object" && fit.overlay !== null ? fit.overlay : null;
  if (api === null || overlay === null) return null;
  /** @type {(Node | string)[]} */
  const links = [];
  if (overlay.tail || overlay.profile) {
    links.push(h("a", { href: api.fitTableCsvUrl(entry.id, "curves"), download: "", "data-testid": "curves-csv" }, ["fitted curves (CSV)"]));
  }
  if (overlay.residual) {
    if (links.length > 0) links.push(" · ");
    links.push(h("a", { href: api.fitTableCsvUrl(entry.id, "residuals"), download: "", "data-testid": "residuals-csv" }, ["residual map (CSV)"]));
  }
  return links.length > 0 ? h("p", { class: "log-tables small" }, ["Download: ", ...links]) : null;
}

async function refresh() {
  const api = state.api;
  if (api === null) return;
  const seq = ++state.seq;
  try {
    const entries = await api.log();
    if (seq !== state.seq) return;
    state.entries = entries;
    render();
  } catch (e) {
    if (seq !== state.seq) return;
    byId("log-empty", HTMLElement).hidden = false;
    byId("log-empty", HTMLElement).textContent = `Could not read the log: ${e instanceof Error ? e.message : String(e)}`;
  }
}

/**
 * Wires the panel and reads the log.
 * @param {SessionApi} api
 * @param {boolean} canEdit
 */
export function wireLog(api, canEdit) {
  state.api = api;
  state.canEdit = canEdit;
  byId("log-csv", HTMLAnchorElement).href = api.logCsvUrl();
  byId("log-json", HTMLAnchorElement).href = api.logJsonUrl();
  byId("report-link", HTMLAnchorElement).href = api.reportUrl();
  byId("archive-link", HTMLAnchorElement).href = api.archiveUrl();
  const compareCsv = document.getElementById("compare-csv");
  if (compareCsv instanceof HTMLAnchorElement) compareCsv.href = api.comparisonCsvUrl();
  if (canEdit) {
    wireAuthorLine(byId("author-line", HTMLElement));
    byId("note-slot", HTMLElement).replaceChildren(
      pinForm({
        submitLabel: "Pin note",
        commentLabel: "Add a note to the log",
        placeholder: "e.g. run 11 needs the readout correction first",
        commentRequired: true,
        testid: "note-form",
        onSubmit: async (author, comment) => {
          const made = await api.pin({ author, comment });
          emit("log", { reconnected: false });
          return `Pinned as entry #${made.id}.`;
        },
      }),
    );
  }
  byId("log-list", HTMLOListElement).addEventListener("focusout", () => {
    if (!pending) return;
    window.setTimeout(() => {
      if (pending && !(document.activeElement instanceof HTMLTextAreaElement)) render();
    }, 0);
  });
  on("log", () => void refresh());
  void refresh();
}

/** @returns {LogEntry[]} the entries as last read */
export function logEntries() {
  return state.entries;
}
