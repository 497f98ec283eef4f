// The metadata form of the chosen dataset (edit links only): fills the
// inputs from a DatasetMeta, reads them back with light checks that name the
// field, and sends them to the server, which has the final word. Knows
// api.js; knows nothing about plotting.

import { ApiError } from "./api.js";
import { byId } from "./dom.js";

/** @typedef {import("./api.js").DatasetMeta} DatasetMeta */
/** @typedef {import("./api.js").DatasetSummary} DatasetSummary */
/** @typedef {import("./api.js").SessionApi} SessionApi */

/** Form inputs by the DatasetMeta field they edit. */
const FIELDS = /** @type {const} */ ({
  platform: "meta-platform",
  alpha: "meta-alpha",
  nearest_neighbour: "meta-nn",
  chain_length: "meta-chain-length",
  source_site: "meta-source-site",
  source_window: "meta-source-window",
  symmetrised: "meta-symmetrised",
  time_unit: "meta-time-unit",
  notes: "meta-notes",
  synthetic: "meta-synthetic",
});

/** @typedef {keyof typeof FIELDS} MetaField */

/**
 * @param {MetaField} field
 * @returns {HTMLInputElement | HTMLTextAreaElement}
 */
function input(field) {
  const id = FIELDS[field];
  return field === "notes" ? byId(id, HTMLTextAreaElement) : byId(id, HTMLInputElement);
}

/**
 * @param {MetaField} field
 * @returns {HTMLInputElement}
 */
function checkbox(field) {
  return byId(FIELDS[field], HTMLInputElement);
}

/** A field-named complaint about what was typed. */
class FieldError extends Error {
  /**
   * @param {MetaField} field
   * @param {string} message
   */
  constructor(field, message) {
    super(message);
    this.field = field;
  }
}

/**
 * Fills the form, unless the person is in the middle of editing it.
 * @param {DatasetMeta} meta
 * @param {{force?: boolean}} [options]
 */
export function fillMetaForm(meta, options = {}) {
  const form = byId("meta-form", HTMLFormElement);
  if (!options.force && form.dataset.dirty === "true") return;
  input("platform").value = meta.platform ?? "";
  input("alpha").value = meta.alpha === null || meta.alpha === undefined ? "" : String(meta.alpha);
  checkbox("nearest_neighbour").checked = Boolean(meta.nearest_neighbour);
  input("chain_length").value = meta.chain_length === null || meta.chain_length === undefined ? "" : String(meta.chain_length);
  input("source_site").value = meta.source_site === null || meta.source_site === undefined ? "" : String(meta.source_site);
  input("source_window").value = meta.source_window ? `${meta.source_window[0]}:${meta.source_window[1]}` : "";
  checkbox("symmetrised").checked = Boolean(meta.symmetrised);
  input("time_unit").value = meta.time_unit ?? "";
  input("notes").value = meta.notes ?? "";
  checkbox("synthetic").checked = Boolean(meta.synthetic);
  form.dataset.dirty = "false";
  clearFieldErrors();
}

/**
 * @param {MetaField} field
 * @param {string} label
 * @returns {number | null}
 */
function optionalNumber(field, label) {
  const text = input(field).value.trim();
  if (text === "") return null;
  const v = Number(text);
  if (!Number.isFinite(v)) throw new FieldError(field, `${label}: “${text}” is not a number.`);
  return v;
}

/**
 * @param {MetaField} field
 * @param {string} label
 * @returns {number | null}
 */
function optionalCount(field, label) {
  const v = optionalNumber(field, label);
  if (v !== null && (!Number.isInteger(v) || v < 0)) {
    throw new FieldError(field, `${label}: ${v} is not a whole number of sites.`);
  }
  return v;
}

/**
 * The window of sources typed as “first:last” (or with a dash), or null.
 * @returns {[number, number] | null}
 */
function optionalWindow() {
  const text = input("source_window").value.trim();
  if (text === "") return null;
  const m = /^(\d+)\s*[:\u2013-]\s*(\d+)$/.exec(text);
  if (m === null) {
    throw new FieldError("source_window", `Sources averaged: “${text}” is not written first:last, e.g. 10:30.`);
  }
  return [Number(m[1]), Number(m[2])];
}

/**
 * Reads the form into a DatasetMeta.
 * @returns {DatasetMeta}
 * @throws {FieldError} naming the field whose text is not a number
 */
function readMetaForm() {
  return {
    platform: input("platform").value.trim(),
    alpha: optionalNumber("alpha", "Nominal α"),
    nearest_neighbour: checkbox("nearest_neighbour").checked,
    chain_length: optionalCount("chain_length", "Chain length"),
    source_site: optionalCount("source_site", "Source site"),
    source_window: optionalWindow(),
    symmetrised: checkbox("symmetrised").checked,
    time_unit: input("time_unit").value.trim(),
    notes: input("notes").value,
    synthetic: checkbox("synthetic").checked,
  };
}

function clearFieldErrors() {
  for (const field of /** @type {MetaField[]} */ (Object.keys(FIELDS))) {
    const el = byId(FIELDS[field], HTMLElement);
    el.removeAttribute("aria-invalid");
    el.removeAttribute("aria-describedby");
  }
}

/**
 * Marks the field a message is about: the server names fields as
 * ``field `alpha`: …``.
 * @param {string} message
 * @param {MetaField | null} field
 */
function markField(message, field) {
  const named = field ?? /** @type {MetaField | null} */ (fieldNamedIn(message));
  if (named === null) return;
  const el = byId(FIELDS[named], HTMLElement);
  el.setAttribute("aria-invalid", "true");
  el.setAttribute("aria-describedby", "meta-status");
  el.focus();
}

/**
 * @param {string} message
 * @returns {MetaField | null}
 */
function fieldNamedIn(message) {
  const match = /field\s+`?([a-z_]+)`?/i.exec(message);
  const name = match?.[1];
  return name !== undefined && Object.hasOwn(FIELDS, name) ? /** @type {MetaField} */ (name) : null;
}

/**
 * Wires the form to the server.
 * @param {SessionApi} api
 * @param {() => string | null} selectedId the dataset being edited
 * @param {(summary: DatasetSummary) => void} onSaved
 */
export function wireMetaForm(api, selectedId, onSaved) {
  const form = byId("meta-form", HTMLFormElement);
  const status = byId("meta-status", HTMLElement);
  const save = byId("meta-save", HTMLButtonElement);
  form.addEventListener("input", () => {
    form.dataset.dirty = "true";
    status.textContent = "Unsaved changes.";
    status.dataset.kind = "pending";
  });
  form.addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const id = selectedId();
    if (id === null) return;
    clearFieldErrors();
    /** @type {DatasetMeta} */
    let meta;
    try {
      meta = readMetaForm();
    } catch (e) {
      if (e instanceof FieldError) {
        status.textContent = e.message;
        status.dataset.kind = "error";
        markField(e.message, e.field);
        return;
      }
      throw e;
    }
    save.disabled = true;
    status.textContent = "Saving…";
    status.dataset.kind = "pending";
    try {
      const summary = await api.updateMeta(id, meta);
      form.dataset.dirty = "false";
      status.textContent = "Saved.";
      status.dataset.kind = "ok";
      onSaved(summary);
    } catch (e) {
      const message = e instanceof ApiError ? e.message : String(e);
      status.textContent = `Not saved: ${message}`;
      status.dataset.kind = "error";
      markField(message, null);
    } finally {
      save.disabled = false;
    }
  });
}
