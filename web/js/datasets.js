// The dataset list and the upload box: renders DatasetSummary rows, reports
// which one is chosen, sends dropped or picked files to the server and shows
// every problem the server found, with its line. Knows api.js; knows nothing
// about plotting.

import { ApiError, guessFormat, nameFromFile } from "./api.js";
import { byId, h } from "./dom.js";
import { formatNumber } from "./format.js";

/** @typedef {import("./api.js").DatasetSummary} DatasetSummary */
/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").Problem} Problem */

/**
 * One-line description of the coupling range, from the metadata.
 * @param {DatasetSummary["meta"]} meta
 * @returns {string}
 */
export function couplingLabel(meta) {
  if (meta.nearest_neighbour) return "nearest-neighbour";
  if (meta.alpha === null || meta.alpha === undefined) return "α not set";
  return `α = ${formatNumber(meta.alpha)}`;
}

/**
 * Which sources C(x,t) comes from, in words, from the metadata.
 * @param {DatasetSummary["meta"]} meta
 * @returns {string}
 */
export function sourceLabel(meta) {
  const symmetrised = meta.symmetrised ? ", symmetrised in x" : "";
  if (meta.source_window) {
    return `mean over sources ${meta.source_window[0]}–${meta.source_window[1]}${symmetrised}`;
  }
  if (meta.source_site === null || meta.source_site === undefined) return "not set (centre assumed)";
  return `j = ${meta.source_site}${symmetrised}`;
}

/**
 * Redraws the list, keeping the chosen dataset marked.
 * @param {DatasetSummary[]} datasets
 * @param {string | null} selectedId
 * @param {(id: string) => void} onSelect
 */
export function renderDatasetList(datasets, selectedId, onSelect) {
  const list = byId("dataset-list", HTMLUListElement);
  const hadFocus = list.contains(document.activeElement);
  const focusedId =
    document.activeElement instanceof HTMLElement
      ? document.activeElement.closest("li")?.dataset.datasetId ?? null
      : null;
  const items = datasets.map((d) => {
    const id = String(d.id);
    const badges = [];
    if (d.meta.synthetic) badges.push(h("span", { class: "badge badge-synthetic" }, ["synthetic"]));
    if (d.has_errors) badges.push(h("span", { class: "badge badge-plain", title: "Has one-sigma error estimates" }, ["± err"]));
    const platform = d.meta.platform || "platform not set";
    const button = h(
      "button",
      {
        type: "button",
        class: "dataset-item",
        "aria-pressed": id === selectedId ? "true" : "false",
      },
      [
        h("span", { class: "ds-name" }, [d.name]),
        h("span", { class: "ds-line" }, [
          h("span", { class: "ds-size" }, [`${d.sites} sites × ${d.times} times`]),
          ...badges,
        ]),
        h("span", { class: "ds-line ds-meta" }, [
          h("span", {}, [platform]),
          h("span", { class: "ds-coupling" }, [couplingLabel(d.meta)]),
        ]),
      ],
    );
    button.addEventListener("click", () => onSelect(id));
    const li = h("li", { "data-dataset-id": id, "data-testid": "dataset-item" }, [button]);
    if (id === selectedId) li.classList.add("is-selected");
    return li;
  });
  list.replaceChildren(...items);
  byId("dataset-list-empty", HTMLElement).hidden = datasets.length > 0;
  if (hadFocus && focusedId !== null) {
    const again = list.querySelector(`li[data-dataset-id="${CSS.escape(focusedId)}"] button`);
    if (again instanceof HTMLElement) again.focus();
  }
}

/**
 * Shows a rejected file's problems, every one with its line.
 * @param {string} fileName
 * @param {string} message
 * @param {Problem[]} problems
 */
export function showProblems(fileName, message, problems) {
  const box = byId("problems", HTMLElement);
  // With a list of problems the server's summary only repeats the first of
  // them, so the heading gives the count instead.
  const detail =
    problems.length === 0 ? message : problems.length === 1 ? "1 problem:" : `${problems.length} problems:`;
  const title = h("p", { class: "problems-title" }, [h("strong", {}, [`${fileName} was not added.`]), ` ${detail}`]);
  /** @type {Node[]} */
  const children = [title];
  if (problems.length > 0) {
    const list = h(
      "ol",
      { class: "problem-list", "aria-label": `Problems in ${fileName}` },
      problems.map((p) =>
        h("li", {}, [
          h("span", { class: "problem-line" }, [p.line === null ? "whole file" : `line ${p.line}`]),
          h("span", { class: "problem-reason" }, [p.reason]),
        ]),
      ),
    );
    children.push(list);
  }
  box.replaceChildren(...children);
  box.hidden = false;
}

/** Hides the problem box. */
export function clearProblems() {
  const box = byId("problems", HTMLElement);
  box.replaceChildren();
  box.hidden = true;
}

/**
 * Wires the file picker and drag-and-drop to the server upload.
 * @param {SessionApi} api
 * @param {(summary: DatasetSummary) => void} onAdded called after the server accepted a file
 */
export function wireUpload(api, onAdded) {
  const input = byId("upload-input", HTMLInputElement);
  const zone = byId("drop-zone", HTMLElement);
  const status = byId("upload-status", HTMLElement);
  let busy = false;

  /** @param {File[]} files */
  async function uploadAll(files) {
    if (busy) {
      status.textContent = "Still sending the previous file; drop again when it is done.";
      return;
    }
    busy = true;
    zone.classList.add("is-busy");
    clearProblems();
    try {
      for (const file of files) {
        const format = guessFormat(file.name);
        if (format === null) {
          showProblems(
            file.name,
            "Its extension does not name a format the server reads: use .csv, .tsv, .txt, .npy, .npz or .json.",
            [],
          );
          status.textContent = "";
          continue;
        }
        const name = nameFromFile(file.name);
        status.textContent = `Sending ${file.name} (${format.toUpperCase()}, ${sizeLabel(file.size)})…`;
        try {
          const summary = await api.upload(name, format, file);
          status.textContent = `Added “${summary.name}”: ${summary.sites} sites × ${summary.times} times.`;
          onAdded(summary);
        } catch (e) {
          status.textContent = "";
          if (e instanceof ApiError) {
            const message =
              e.status === 403
                ? `This link is view-only (${e.message}).`
                : e.status === 413
                  ? `The file is too large for the server (${e.message}).`
                  : e.message;
            showProblems(file.name, message, e.problems);
          } else {
            showProblems(file.name, String(e), []);
          }
        }
      }
    } finally {
      busy = false;
      zone.classList.remove("is-busy");
      input.value = "";
    }
  }

  input.addEventListener("change", () => {
    const files = input.files ? Array.from(input.files) : [];
    if (files.length > 0) void uploadAll(files);
  });

  // The whole window accepts drops, so that a file dragged onto the big plot
  // on a projector is not opened by the browser in place of the dashboard.
  let depth = 0;
  window.addEventListener("dragenter", (ev) => {
    if (!carriesFiles(ev)) return;
    depth += 1;
    zone.classList.add("is-target");
  });
  window.addEventListener("dragleave", (ev) => {
    if (!carriesFiles(ev)) return;
    depth = Math.max(0, depth - 1);
    if (depth === 0) zone.classList.remove("is-target");
  });
  window.addEventListener("dragover", (ev) => {
    if (!carriesFiles(ev)) return;
    ev.preventDefault();
    if (ev.dataTransfer) ev.dataTransfer.dropEffect = "copy";
  });
  window.addEventListener("drop", (ev) => {
    if (!carriesFiles(ev)) return;
    ev.preventDefault();
    depth = 0;
    zone.classList.remove("is-target");
    const files = ev.dataTransfer ? Array.from(ev.dataTransfer.files) : [];
    if (files.length > 0) void uploadAll(files);
  });
}

/**
 * @param {DragEvent} ev
 * @returns {boolean}
 */
function carriesFiles(ev) {
  return Boolean(ev.dataTransfer && Array.from(ev.dataTransfer.types).includes("Files"));
}

/**
 * @param {number} bytes
 * @returns {string}
 */
function sizeLabel(bytes) {
  if (bytes < 1024) return `${bytes} B`;
  if (bytes < 1024 * 1024) return `${(bytes / 1024).toFixed(1)} KiB`;
  return `${(bytes / (1024 * 1024)).toFixed(1)} MiB`;
}
