// The coupling panel: a coupling matrix J_ij (an N × N CSV) sent to the
// server's stateless fit, shown as a map of log10 |J_ij| and as |J_ij|
// against |i − j| on log–log axes with the fitted power law J / r^α, and the
// fitted values with their errors. Nothing is stored, so view links may use
// it too. Every number shown comes from the server; this module only pairs
// each off-diagonal entry with its distance |i − j| for the plot. Knows
// api.js, views.js and plot.js.

import { ApiError } from "./api.js";
import { emit } from "./bus.js";
import { byId, h } from "./dom.js";
import { withError } from "./fitformat.js";
import { formatNumber } from "./format.js";
import { clearPlot, drawCouplingDecay, drawCouplingMatrix, fitToContainer } from "./plot.js";
import { drawFailed, isVisible, note, registerView } from "./views.js";

/** @typedef {import("./api.js").SessionApi} SessionApi */
/** @typedef {import("./api.js").CouplingAnswer} CouplingAnswer */
/** @typedef {import("./api.js").Problem} Problem */

/** @type {CouplingAnswer | null} */
let answer = null;

/** @returns {HTMLElement[]} */
function figures() {
  return [byId("view-couplings", HTMLElement), byId("view-couplings-decay", HTMLElement)];
}

/**
 * Off-diagonal entries above the diagonal with their distance, leaving out
 * zero and missing ones (a log axis has no place for them).
 * @param {Array<Array<number | null>>} matrix
 * @returns {{r: number[], J: number[]}}
 */
export function byDistance(matrix) {
  /** @type {number[]} */
  const r = [];
  /** @type {number[]} */
  const J = [];
  matrix.forEach((row, i) =>
    row.forEach((v, j) => {
      if (j > i && v !== null && Number.isFinite(v) && v !== 0) {
        r.push(j - i);
        J.push(Math.abs(v));
      }
    }),
  );
  return { r, J };
}

/**
 * @param {string} fileName
 * @param {string} message
 * @param {Problem[]} problems
 */
function showCouplingProblems(fileName, message, problems) {
  const box = byId("couplings-problems", HTMLElement);
  box.replaceChildren(
    h("p", { class: "problems-title" }, [h("strong", {}, [`${fileName} could not be fitted.`]), ` ${message}`]),
    ...(problems.length === 0
      ? []
      : [
          h(
            "ol",
            { class: "problem-list", "aria-label": `Problems in ${fileName}` },
            problems.map((p) =>
              h("li", {}, [
                h("span", { class: "problem-line" }, [p.line === null ? "whole file" : `line ${p.line}`]),
                h("span", { class: "problem-reason" }, [p.reason]),
              ]),
            ),
          ),
        ]),
  );
  box.hidden = false;
}

function draw() {
  if (!isVisible("couplings")) return;
  if (answer === null) {
    note("couplings", "Choose a coupling matrix (an N × N CSV of J_ij) above to see it and its power-law fit.");
    clearPlot(byId("view-couplings-decay", HTMLElement));
    return;
  }
  note("couplings", null);
  const { r, J } = byDistance(answer.matrix);
  const [map, decay] = figures();
  if (!map || !decay) return;
  drawCouplingMatrix(map, { matrix: answer.matrix }).catch((e) => drawFailed("couplings", e));
  if (r.length === 0) {
    clearPlot(decay);
    decay.replaceChildren(h("p", { class: "muted" }, ["No non-zero coupling off the diagonal to draw against distance."]));
    return;
  }
  drawCouplingDecay(decay, { r, J, fit: { J: answer.fit.J, alpha: answer.fit.alpha } }).catch((e) => drawFailed("couplings", e));
}

/** Shows the fitted values and the server's notes. */
function renderFit() {
  const list = byId("couplings-fit", HTMLElement);
  const notes = byId("couplings-notes", HTMLElement);
  if (answer === null) {
    list.replaceChildren();
    notes.replaceChildren();
    return;
  }
  const f = answer.fit;
  /** @type {Array<[string, string]>} */
  const rows = [
    ["sites", String(answer.sites)],
    ["α", withError(f.alpha, f.alpha_err)],
    ["J", withError(f.J, f.J_err)],
  ];
  if (typeof f.chi2_dof === "number") rows.push(["χ²/dof", formatNumber(f.chi2_dof)]);
  list.replaceChildren(...rows.map(([term, value]) => h("div", { class: "fact" }, [h("dt", {}, [term]), h("dd", { "data-term": term }, [value])])));
  notes.replaceChildren(...answer.notes.map((n) => h("li", {}, [n])));
}

/**
 * Wires the coupling panel's file picker and registers its figures.
 * @param {SessionApi} api
 */
export function wireCouplings(api) {
  registerView("couplings", {
    shown: () => {
      draw();
      for (const el of figures()) fitToContainer(el);
    },
    figures,
  });
  const input = byId("couplings-input", HTMLInputElement);
  const status = byId("couplings-status", HTMLElement);
  input.addEventListener("change", async () => {
    const file = input.files?.[0];
    if (!file) return;
    byId("couplings-problems", HTMLElement).hidden = true;
    status.dataset.kind = "";
    status.textContent = `Fitting ${file.name}…`;
    try {
      answer = await api.couplings(file);
      status.textContent = `Fitted ${file.name}: ${answer.sites} × ${answer.sites} couplings.`;
      status.dataset.kind = "ok";
      emit("couplings", { name: file.name, matrix: answer.matrix.map((row) => row.map((v) => v ?? 0)) });
    } catch (e) {
      answer = null;
      status.textContent = "";
      status.dataset.kind = "error";
      if (e instanceof ApiError) showCouplingProblems(file.name, e.message, e.problems);
      else showCouplingProblems(file.name, String(e), []);
    } finally {
      input.value = "";
    }
    renderFit();
    draw();
  });
}
