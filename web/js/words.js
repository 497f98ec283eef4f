// Plain words for the names the server's messages use. The API speaks to
// scripts as well as to this page, so its errors name request fields
// (`windows.t_min`, `options.sites`); the page shows people the quantity
// instead. Display only: knows nothing about the API's transport or plotting.

/**
 * Request fields and identifiers the server names, with what a person calls
 * them.
 * @type {Record<string, string>}
 */
const FIELD_WORDS = {
  "windows.t_min": "the start of the time window",
  "windows.t_max": "the end of the time window",
  "windows.x_max": "the |x| window",
  windows: "the fit windows",
  t_min: "the start of the time window",
  t_max: "the end of the time window",
  x_max: "the |x| window",
  "options.sites": "the number of chain sites",
  sites: "the number of chain sites",
  "options.alpha": "α",
  alpha: "α",
  "options.gamma0": "the hop rate γ0",
  gamma0: "the hop rate γ0",
  "options.source": "the source site",
  source: "the source site",
  "options.bootstrap": "the number of bootstrap resamples",
  "options.seed": "the seed",
  "options.q": "the width quantile q",
  "options.order": "the order in t",
  "options.samples": "the number of random vectors",
  mu: "μ",
  job: "the job name",
  name: "the name",
  comment: "the comment",
  author: "the author's name",
  dataset: "the dataset",
  retracts: "the retracted entry",
  fit: "the fit",
  max_drop: "the largest allowed drop",
  lattice_walk: "lattice walk",
  spin_chain: "spin chain",
  short_time: "short-time expansion",
};

/**
 * @param {string} name
 * @returns {string}
 */
function fieldWords(name) {
  return FIELD_WORDS[name] ?? (name.split(".").pop() ?? name).replace(/_/g, " ");
}

/**
 * Rewrites a server message for people: "field `options.sites`: give the
 * chain length …" becomes "The number of chain sites: give the chain length …",
 * and other back-quoted identifiers become words.
 * @param {string} message
 * @returns {string}
 */
export function plainMessage(message) {
  let text = message.replace(/field `([^`]+)`:\s*/g, (_, name) => {
    const words = fieldWords(name);
    return `${words.charAt(0).toUpperCase()}${words.slice(1)}: `;
  });
  text = text.replace(/`([^`]+)`/g, (_, name) => fieldWords(name));
  return text;
}

/**
 * Names of the quantities in a fit's detailed report.
 * @type {Record<string, string>}
 */
const REPORT_WORDS = {
  delta_aic: "ΔAIC (Gaussian − stable)",
  model: "preferred shape",
  preferred: "preferred shape",
  z_scan: "S(z) scan",
  z_interval: "interval of z",
  d_interval: "interval of D",
  z_bias: "bootstrap bias of z",
  d_bias: "bootstrap bias of D",
  err_scale: "error scale of a poor fit",
  poor_fit: "poor fit",
  n_bootstrap: "bootstrap resamples",
  bootstrap: "bootstrap resamples",
  mu: "μ",
  gamma0: "γ0",
  alpha: "α",
  seed: "seed",
};

/** Values the server sends as identifiers. @type {Record<string, string>} */
const VALUE_WORDS = {
  gaussian: "Gaussian",
  stable: "stable (Lévy)",
  levy: "Lévy",
  lattice_walk: "lattice walk",
  spin_chain: "spin chain",
  short_time: "short-time expansion",
  true: "yes",
  false: "no",
};

/**
 * @param {string} key a report field
 * @returns {string} its name for people
 */
export function reportName(key) {
  return REPORT_WORDS[key] ?? key.replace(/_/g, " ").replace(/\bmu\b/g, "μ").replace(/\bgamma0\b/g, "γ0").replace(/\balpha\b/g, "α").replace(/\baic\b/gi, "AIC");
}

/**
 * A value the server sent as an identifier, in words.
 * @param {string | boolean} value
 * @returns {string}
 */
export function valueWords(value) {
  const text = String(value);
  return VALUE_WORDS[text.toLowerCase()] ?? text.replace(/_/g, " ");
}

/**
 * Text with the plain-text notation of formulas (`J_ij`, `e^{ikx}`, `σz_j`)
 * as nodes with real subscripts and superscripts. Builds elements, never
 * HTML, so the text cannot inject markup.
 * @param {string} text
 * @returns {Array<Node | string>}
 */
export function formulaNodes(text) {
  /** @type {Array<Node | string>} */
  const out = [];
  const pattern = /σ([zxy+-])|([_^])(\{[^}]*\}|-?[A-Za-z0-9]+(?:\.[0-9]+)?)/g;
  let last = 0;
  for (const m of text.matchAll(pattern)) {
    const at = m.index ?? 0;
    if (at > last) out.push(text.slice(last, at));
    if (m[1] !== undefined) {
      const sup = document.createElement("sup");
      sup.textContent = m[1] === "-" ? "−" : m[1];
      out.push("σ", sup);
    } else {
      const el = document.createElement(m[2] === "_" ? "sub" : "sup");
      el.textContent = (m[3] ?? "").replace(/^\{|\}$/g, "").replace(/-/g, "−");
      out.push(el);
    }
    last = at + m[0].length;
  }
  if (last < text.length) out.push(text.slice(last));
  return out;
}

/**
 * A note from the server in words: a JSON record at its end (the shot
 * estimator's provenance) becomes a short list of "name value" pairs.
 * @param {string} note
 * @returns {string}
 */
export function noteWords(note) {
  const at = note.indexOf("{");
  if (at < 0 || !note.trimEnd().endsWith("}")) return note;
  /** @type {unknown} */
  let record;
  try {
    record = JSON.parse(note.slice(at));
  } catch {
    return note;
  }
  if (record === null || typeof record !== "object") return note;
  /** @type {string[]} */
  const parts = [];
  /**
   * @param {Record<string, unknown>} obj
   */
  const walk = (obj) => {
    for (const [key, value] of Object.entries(obj)) {
      if (value === null || value === undefined) continue;
      const name = reportName(key);
      if (typeof value === "number" || typeof value === "string" || typeof value === "boolean") {
        parts.push(`${name} ${typeof value === "number" ? String(Number(value.toPrecision(4))) : valueWords(value)}`);
      } else if (Array.isArray(value) && value.length === 2 && value.every((v) => typeof v === "number")) {
        parts.push(`${name} ${value[0]} … ${value[1]}`);
      } else if (typeof value === "object" && !Array.isArray(value)) {
        walk(/** @type {Record<string, unknown>} */ (value));
      }
    }
  };
  walk(/** @type {Record<string, unknown>} */ (record));
  return `${note.slice(0, at).trimEnd()} ${parts.join("; ")}`;
}
