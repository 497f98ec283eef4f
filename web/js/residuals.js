// The residual view: data − model on the dataset's grid as a map, for the
// theory overlay (the server's `residual`) and for fits whose overlay carries
// a residual map. Dividing by the errors is offered when there are any: the
// data's one-sigma errors combined in quadrature with the model's own (a
// sampled model has them), σ = √(σ_data² + σ_model²), both as the server sent
// them. Knows the bus and plot.js; computes nothing but that display scaling.

import { on } from "./bus.js";
import { byId, h } from "./dom.js";
import { methodName } from "./fitformat.js";
import { drawDifferenceMap, fitToContainer } from "./plot.js";
import { currentTimeAxis, drawFailed, isVisible, note, registerView, revision, theoryName } from "./views.js";
import { getWindows } from "./windows.js";

/** @typedef {import("./api.js").DatasetDetail} DatasetDetail */

/**
 * A difference map ready to draw.
 * @typedef {object} Residual
 * @property {string} key
 * @property {string} label
 * @property {number[]} x
 * @property {number[]} t
 * @property {Array<Array<number | null>>} values data − model
 * @property {Array<Array<number | null>> | null} err one-sigma errors of the model, when it has them
 */

const state = {
  /** @type {DatasetDetail | null} */
  detail: null,
  /** @type {Map<string, Residual>} */
  sources: new Map(),
  /** @type {string | null} */
  chosen: null,
  /** @type {"raw" | "sigma"} */
  units: "raw",
};

function fillSources() {
  const select = byId("residual-source", HTMLSelectElement);
  const options = [...state.sources.values()].map((r) => h("option", { value: r.key }, [r.label]));
  select.replaceChildren(...options);
  select.disabled = options.length === 0;
  if (state.chosen === null || !state.sources.has(state.chosen)) state.chosen = options[0]?.value ?? null;
  if (state.chosen !== null) select.value = state.chosen;
}

function draw() {
  if (!isVisible("residual")) return;
  const d = state.detail;
  if (d === null) return;
  const r = state.chosen === null ? undefined : state.sources.get(state.chosen);
  const sigma = byId("residual-sigma", HTMLInputElement);
  // The data's errors line up with the residual when it is on the data's grid.
  const dataErr = r && d.err && r.t.length === d.t.length && r.x.length === d.x.length ? d.err : null;
  sigma.disabled = !r || (r.err === null && dataErr === null);
  if (!r) {
    note("residual", "Nothing to compare with yet. Compute a theory overlay (Theory, on the left) or run a fit that returns a residual map (Fits).");
    return;
  }
  const useSigma = state.units === "sigma" && !sigma.disabled;
  const values = useSigma
    ? r.values.map((row, i) => row.map((v, j) => {
        const ed = dataErr?.[i]?.[j] ?? 0;
        const em = r.err?.[i]?.[j] ?? 0;
        const e = Math.sqrt(ed * ed + em * em);
        return v === null || !(e > 0) ? null : v / e;
      }))
    : r.values;
  // The log time axis has no place for t ≤ 0.
  const rows = r.t.map((_, i) => i).filter((i) => currentTimeAxis() === "linear" || (r.t[i] ?? 0) > 0);
  byId("caption-residual", HTMLElement).textContent = `${r.label}${useSigma ? ", in units of the error" : ""}. The colour range is symmetric about 0 and set by the 98th percentile of |data − model|.`;
  note("residual", null);
  drawDifferenceMap(byId("view-residual", HTMLElement), {
    x: r.x,
    t: rows.map((i) => r.t[i] ?? 0),
    values: rows.map((i) => values[i] ?? []),
    timeUnit: d.meta.time_unit,
    label: useSigma ? "(data − model) / σ" : "data − model",
    tScale: currentTimeAxis(),
    revision: revision(d, `${currentTimeAxis()}|${r.key}`),
    windows: getWindows(),
  }).catch((e) => drawFailed("residual", e));
}

/** Wires the view's controls and listens for new sources. */
export function wireResiduals() {
  registerView("residual", {
    shown: () => {
      draw();
      fitToContainer(byId("view-residual", HTMLElement));
    },
    figures: () => [byId("view-residual", HTMLElement)],
  });
  const select = byId("residual-source", HTMLSelectElement);
  select.addEventListener("change", () => {
    state.chosen = select.value;
    draw();
  });
  for (const radio of document.querySelectorAll('input[name="residual-units"]')) {
    if (!(radio instanceof HTMLInputElement)) continue;
    radio.addEventListener("change", () => {
      if (radio.checked) state.units = radio.value === "sigma" ? "sigma" : "raw";
      draw();
    });
  }
  on("dataset", (detail) => {
    const changed = detail === null || state.detail === null || String(detail.id) !== String(state.detail.id);
    state.detail = detail;
    if (changed) {
      state.sources.clear();
      state.chosen = null;
      fillSources();
    }
    draw();
  });
  on("theory", (theory) => {
    state.sources.delete("theory");
    if (theory !== null && Array.isArray(theory.residual)) {
      state.sources.set("theory", {
        key: "theory",
        label: `Theory: ${theoryName(theory.model)}`,
        x: theory.x,
        t: theory.t,
        values: theory.residual,
        err: Array.isArray(theory.err) ? theory.err : null,
      });
      state.chosen = "theory";
    }
    fillSources();
    draw();
  });
  on("fit", (fit) => {
    const d = state.detail;
    if (d === null || String(fit.dataset) !== String(d.id)) return;
    const residual = /** @type {any} */ (fit.overlay ?? {}).residual;
    if (!residual || !Array.isArray(residual.values)) return;
    const key = `fit-${fit.method}`;
    state.sources.set(key, {
      key,
      label: `Fit: ${methodName(fit.method)}`,
      x: Array.isArray(residual.x) ? residual.x : d.x,
      t: Array.isArray(residual.t) ? residual.t : d.t,
      values: residual.values,
      err: Array.isArray(residual.err) ? residual.err : null,
    });
    fillSources();
    draw();
  });
  on("windows", () => draw());
}
