// The cross-run view: every pinned fit with z or D across the session's
// datasets, as a table (platform, nominal α, estimator, values with errors,
// the entry they come from; withdrawn ones struck through) and as plots of z
// and D against nominal α with the expected z = min(2α − 1, 2). The rows
// come from the server's comparison route; this module only lays them out.

import { on } from "./bus.js";
import { byId, h } from "./dom.js";
import { methodName, withError } from "./fitformat.js";
import { formatNumber } from "./format.js";
import { drawComparison, fitToContainer } from "./plot.js";
import { drawFailed, isVisible, note, registerView } from "./views.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").ComparisonRow} ComparisonRow */

const state = {
  /** @type {SessionApi | null} */
  api: null,
  /** @type {ComparisonRow[] | null} */
  rows: null,
  /** The rows may be out of date (the log changed while the view was hidden). */
  stale: true,
  seq: 0,
};

/**
 * @param {ComparisonRow[]} rows
 */
function renderTable(rows) {
  const body = byId("compare-rows", HTMLTableSectionElement);
  body.replaceChildren(
    ...rows.map((r) =>
      h("tr", { class: r.retracted ? "is-retracted" : "", "data-entry": String(r.entry), ...(r.retracted ? { title: "withdrawn by a later entry" } : {}) }, [
        h("th", { scope: "row" }, [r.dataset_name ?? (r.dataset === null ? "—" : `dataset ${r.dataset}`)]),
        h("td", {}, [r.platform || "—"]),
        h("td", { class: "num" }, [r.alpha === null ? "—" : formatNumber(r.alpha)]),
        h("td", {}, [methodName(r.method)]),
        h("td", { class: "num" }, [r.z === null ? "—" : withError(r.z, r.z_err)]),
        h("td", { class: "num" }, [r.D === null ? "—" : withError(r.D, r.D_err)]),
        h("td", { class: "num" }, [`#${r.entry}${r.retracted ? " (withdrawn)" : ""}`]),
      ]),
    ),
  );
  byId("compare-empty", HTMLElement).hidden = rows.length > 0;
}

function draw() {
  const rows = state.rows;
  if (rows === null) return;
  renderTable(rows);
  const live = rows.filter((r) => !r.retracted && r.alpha !== null);
  /**
   * @param {"z" | "D"} what
   * @returns {import("./plotpanels.js").ComparisonPoint[]}
   */
  const points = (what) =>
    live
      .filter((r) => r[what] !== null)
      .map((r) => ({
        alpha: /** @type {number} */ (r.alpha),
        value: /** @type {number} */ (r[what]),
        err: what === "z" ? r.z_err : r.D_err,
        method: methodName(r.method),
        label: `${r.dataset_name ?? "dataset"} · #${r.entry}`,
      }));
  const z = points("z");
  const D = points("D").filter((p) => p.value > 0);
  const missingAlpha = rows.filter((r) => !r.retracted && r.alpha === null).length;
  if (z.length === 0 && D.length === 0) {
    note("compare", rows.length === 0
      ? "Pin fits of z or D (Fits, on the left) and they are compared here across datasets."
      : missingAlpha > 0
        ? `${missingAlpha} pinned fit${missingAlpha === 1 ? " has" : "s have"} no nominal α in the dataset metadata, so nothing can be plotted against α.`
        : "Every pinned fit with z or D has been withdrawn.");
    return;
  }
  note("compare", null);
  drawComparison(byId("view-compare", HTMLElement), byId("view-compare-d", HTMLElement), { z, D }).catch((e) => drawFailed("compare", e));
}

async function refresh() {
  const api = state.api;
  if (api === null) return;
  const seq = ++state.seq;
  try {
    const rows = await api.comparison();
    if (seq !== state.seq) return;
    state.rows = rows;
    state.stale = false;
    draw();
  } catch (e) {
    if (seq !== state.seq) return;
    state.rows = null;
    renderTable([]);
    note("compare", `Could not read the comparison: ${e instanceof Error ? e.message : String(e)}`);
  }
}

/** @param {SessionApi} api */
export function wireCompare(api) {
  state.api = api;
  registerView("compare", {
    shown: () => {
      if (state.stale) void refresh();
      else {
        draw();
        fitToContainer(byId("view-compare", HTMLElement));
        fitToContainer(byId("view-compare-d", HTMLElement));
      }
    },
    figures: () => [byId("view-compare", HTMLElement), byId("view-compare-d", HTMLElement)],
  });
  // Pins, retractions and metadata (α, platform) all change the table.
  const changed = () => {
    state.stale = true;
    if (isVisible("compare")) void refresh();
  };
  on("log", changed);
  on("dataset", changed);
}
