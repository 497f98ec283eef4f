// The only module that speaks HTTP to the spreadscope server. It owns the
// shapes of the JSON the server returns (as JSDoc types) and turns every
// non-2xx answer into an ApiError carrying the server's own message and, for
// rejected uploads, its line-numbered problems. It knows nothing about the
// page's elements or about plotting.

import { plainMessage } from "./words.js";

/**
 * @typedef {object} Session
 * @property {string} name
 * @property {boolean} can_edit
 * @property {string} view_url
 * @property {string | null} [edit_url] present only for edit links
 * @property {string} created_at
 * @property {string} program_version
 * @property {string} conventions
 */

/**
 * Descriptive metadata a person may edit.
 * @typedef {object} DatasetMeta
 * @property {string} platform
 * @property {number | null} alpha
 * @property {boolean} nearest_neighbour
 * @property {number | null} chain_length
 * @property {number | null} source_site
 * @property {[number, number] | null} source_window first and last source of a window mean
 * @property {boolean} symmetrised
 * @property {string} time_unit
 * @property {string} notes
 * @property {boolean} synthetic
 */

/**
 * @typedef {object} DatasetSummary
 * @property {string | number} id
 * @property {string} name
 * @property {string} format
 * @property {string} content_hash
 * @property {string} created_at
 * @property {number} sites
 * @property {number} times
 * @property {number} missing
 * @property {[number, number]} x_range
 * @property {[number, number]} t_range
 * @property {boolean} has_errors
 * @property {[number, number]} sum_rule_range
 * @property {string[]} notes
 * @property {DatasetMeta} meta
 */

/**
 * @typedef {object} SumRulePoint
 * @property {number} t
 * @property {number} sum
 * @property {number | null} err
 * @property {boolean | number} present
 */

/**
 * @typedef {object} AutocorrelationPoint
 * @property {number} t
 * @property {number} C
 * @property {number | null} err
 */

/**
 * @typedef {object} DatasetDetailExtra
 * @property {number[]} x
 * @property {number[]} t
 * @property {Array<Array<number | null>>} C rows are times, columns are sites
 * @property {Array<Array<number | null>> | null} err
 * @property {SumRulePoint[]} sum_rule
 * @property {AutocorrelationPoint[] | null} autocorrelation
 * @property {DefaultWindows} [default_windows] the one window rule's windows
 */

/** @typedef {DatasetSummary & DatasetDetailExtra} DatasetDetail */

/**
 * @typedef {object} Problem
 * @property {number | null} line
 * @property {string} reason
 */

/**
 * @typedef {object} ServerEvent
 * @property {string} kind "dataset-added", "dataset-updated", "log-added" or
 *   "job-progress" (others are ignored)
 * @property {string | number} [id]
 * @property {string} [job] job-progress: the id the page chose for its fit
 * @property {number} [fraction] job-progress: done share, 0…1
 */

/**
 * Fit windows. A missing or null bound means "no limit on this side".
 * @typedef {object} FitWindows
 * @property {number | null} [t_min]
 * @property {number | null} [t_max]
 * @property {number | null} [x_max]
 */

/** Estimators the fits route runs. */
export const FIT_METHODS = /** @type {const} */ (["tail", "width", "collapse", "profile", "lattice_walk", "short_time", "analysis"]);

/** @typedef {typeof FIT_METHODS[number]} FitMethod */

/**
 * One fitted parameter.
 * @typedef {object} FitParameter
 * @property {number} value
 * @property {number | null} err one-sigma error from the fit's covariance (or the method's own rule)
 * @property {number | null} [err_bootstrap] one-sigma error from the bootstrap, when it ran
 * @property {number | null} [err_sys] window error: spread over neighbouring windows
 * @property {boolean} [fixed] held fixed by the model
 */

/**
 * The headline of a map (analysis only).
 * @typedef {object} Verdict
 * @property {string} class ballistic, levy, diffusive, subdiffusive or undetermined
 * @property {number | null} z
 * @property {number | null} z_err_stat
 * @property {number | null} z_err_sys
 * @property {number | null} D
 * @property {number | null} D_err_stat
 * @property {number | null} D_err_sys
 * @property {string} D_units
 * @property {string} D_convention
 * @property {string} estimator
 * @property {string} why
 * @property {string[]} reasons
 * @property {string} headline
 */

/**
 * The windows of the one window rule for a dataset.
 * @typedef {object} DefaultWindows
 * @property {number} t_min
 * @property {number} t_max
 * @property {number | null} x_max
 * @property {string} rule
 * @property {number} bootstrap default bootstrap resamples
 */

/**
 * A fit result as the server returns it (and as it is pinned). `report`
 * holds method-specific detail (collapse: `z_scan` [[z, S]…] and
 * `z_interval`; tail: `local_exponent` [{t, value, err}]); `overlay` holds
 * curves to draw: `tail` {t, C} on the autocorrelation, `profile`
 * {x, t, C} on the slices, `residual` {x, t, values} as a map (data − fit).
 * @typedef {object} FitResult
 * @property {string} method
 * @property {string | number} dataset
 * @property {string} dataset_hash
 * @property {FitWindows} windows
 * @property {number | null} seed
 * @property {Record<string, FitParameter>} parameters
 * @property {Record<string, unknown>} quality chi2_dof, collapse_quality, …
 * @property {unknown} termination why the estimator stopped
 * @property {string[]} warnings
 * @property {string} program_version
 * @property {Record<string, unknown>} report
 * @property {Record<string, unknown> | null} [overlay]
 * @property {Verdict} [verdict] analysis only
 * @property {string} [window_rule] how the windows were chosen
 * @property {number} [bootstrap] resamples used
 */

/**
 * @typedef {object} FitRequest
 * @property {FitMethod} method
 * @property {FitWindows} windows
 * @property {Record<string, unknown>} options
 * @property {string} [job] id for job-progress events and cancelling
 */

/**
 * One pinned entry of the session log.
 * @typedef {object} LogEntry
 * @property {number} id
 * @property {string} created_at
 * @property {string} author
 * @property {string} comment
 * @property {number | null} dataset
 * @property {string | null} dataset_name
 * @property {string | null} dataset_hash
 * @property {number | null} retracts id of the entry this one withdraws
 * @property {FitResult | null} fit
 * @property {string} program_version
 */

/**
 * @typedef {object} PinRequest
 * @property {string} author
 * @property {string} comment
 * @property {string | number} [dataset]
 * @property {FitResult} [fit]
 * @property {number} [retracts]
 */

/**
 * @typedef {object} CollapseQualityAnswer
 * @property {number} z
 * @property {number | null} quality S(z); null or absent when no point had partners
 * @property {number} n_points
 */

/**
 * The model's rescaled profile y = t^{1/z} C at u = x / t^{1/z}.
 * @typedef {object} ScalingFunction
 * @property {number} mu
 * @property {number} D
 * @property {number[]} u
 * @property {number[]} f
 */

/** Theory models of the theory route. */
export const THEORY_MODELS = /** @type {const} */ (["lattice_walk", "spin_chain", "short_time"]);

/** @typedef {typeof THEORY_MODELS[number]} TheoryModel */

/**
 * Missing chain data default to the dataset's metadata on the server.
 * @typedef {object} TheoryRequest
 * @property {TheoryModel} model
 * @property {number} [gamma0]
 * @property {number} [alpha]
 * @property {number} [sites]
 * @property {number} [source]
 * @property {number} [delta]
 * @property {number} [coupling]
 * @property {number} [order]
 * @property {"auto" | "exact" | "typicality" | "dtwa"} [method] how spin-chain dynamics are computed
 * @property {number} [samples] random vectors of the typicality method
 * @property {number} [trajectories] trajectories of the semiclassical method
 * @property {number[][]} [couplings] a measured coupling matrix J_ij replacing the power law
 * @property {boolean} [plan] only say the method and the time it would take
 * @property {number} [seed]
 * @property {string} [job] id for job-progress events and cancelling
 */

/**
 * How a theory request would be computed, said before it runs; when the
 * request is not complete yet, only `ready: false` and the reason.
 * @typedef {object} TheoryPlan
 * @property {boolean} ready
 * @property {string} [reason] what is missing or wrong, when not ready
 * @property {string} [method] in words
 * @property {number} [seconds] estimated wall time on two cores
 * @property {number} [sites]
 * @property {number} [source]
 */

/**
 * A model computed on the dataset's grid.
 * @typedef {object} TheoryResult
 * @property {string} model
 * @property {string} [method] how the server computed it, in words
 * @property {Record<string, unknown>} parameters the values the server used
 * @property {number[]} x
 * @property {number[]} t
 * @property {Array<Array<number | null>>} C times × sites
 * @property {Array<Array<number | null>>} residual data − model, null where data are missing
 * @property {Array<Array<number | null>> | null} [err] one-sigma errors of the model (a sampled method), when known
 * @property {string[]} warnings
 */

/**
 * One pinned fit with z or D, joined with its dataset's metadata.
 * @typedef {object} ComparisonRow
 * @property {number} entry
 * @property {number | null} dataset
 * @property {string | null} dataset_name
 * @property {string | null} platform
 * @property {number | null} alpha
 * @property {string} method
 * @property {number | null} z
 * @property {number | null} z_err
 * @property {number | null} D
 * @property {number | null} D_err
 * @property {string} created_at
 * @property {string} author
 * @property {boolean} [retracted]
 */

/**
 * Estimator settings for shot records. Unset fields keep the server's defaults.
 * @typedef {object} ShotOptions
 * @property {number} [source] source site j of C_ij(t)
 * @property {string} [bulk] "A:B", the sites averaged over as sources
 * @property {string} [readout] "p01,p10", the readout flip probabilities
 * @property {boolean} [readout_from_t0] calibrate the readout from the t = 0 records
 * @property {boolean} [symmetrise]
 * @property {boolean} [renormalise]
 * @property {number} [bootstrap]
 * @property {number} [seed]
 */

/**
 * One time of the site-resolved sum rule Σ_i C_ij(t).
 * @typedef {object} ShotSumPoint
 * @property {number} t
 * @property {number} sum
 * @property {number | null} err
 * @property {boolean} departs whether the sum departs from 1 beyond its error
 * @property {number | null} factor the renormalisation factor used, when one was
 */

/**
 * The site-resolved correlations a shot-record dataset was made from.
 * @typedef {object} ShotView
 * @property {number} sites
 * @property {number} source
 * @property {number[]} times
 * @property {Array<Array<number | null>>} C times × sites, C_{i,source}(t)
 * @property {Array<Array<number | null>> | null} err
 * @property {ShotSumPoint[]} sum_rule
 * @property {number[]} states_per_time
 * @property {number[]} shots_per_time
 * @property {string[]} warnings
 * @property {Record<string, unknown>} options
 */

/**
 * The power-law fit J_ij = J / |i−j|^α of a coupling matrix.
 * @typedef {object} CouplingFit
 * @property {number} J
 * @property {number | null} J_err
 * @property {number} alpha
 * @property {number | null} alpha_err
 * @property {number | null} chi2_dof
 */

/**
 * @typedef {object} CouplingAnswer
 * @property {number} sites
 * @property {Array<Array<number | null>>} matrix
 * @property {CouplingFit} fit
 * @property {string[]} notes
 */

/** Upload formats the server accepts. */
export const FORMATS = /** @type {const} */ (["csv", "npy", "npz", "json"]);

/** Shot-record formats the shots route reads. */
export const SHOT_FORMATS = /** @type {const} */ (["csv", "npz", "h5"]);

/** @typedef {typeof SHOT_FORMATS[number]} ShotFormat */

/** @typedef {typeof FORMATS[number]} UploadFormat */

/** A failed request, with what the server said about it. */
export class ApiError extends Error {
  /**
   * @param {number} status HTTP status, 0 when the server could not be reached
   * @param {string} message the server's `error` text or a description
   * @param {Problem[]} problems line-numbered problems of a rejected upload
   * @param {number | null} [retryAfter] seconds the server asked to wait (429)
   */
  constructor(status, message, problems, retryAfter = null) {
    super(plainMessage(message));
    this.name = "ApiError";
    this.status = status;
    this.problems = problems;
    this.retryAfter = retryAfter;
  }
}

/**
 * The session token is the last segment of the page path `/s/{token}`.
 * @param {Location} location
 * @returns {string}
 */
export function tokenFromLocation(location) {
  const parts = location.pathname.split("/").filter((p) => p.length > 0);
  return decodeURIComponent(parts[parts.length - 1] ?? "");
}

/**
 * Reads a failed response into an ApiError, accepting JSON `{error, problems}`
 * or plain text, because a proxy or a size limit may answer without JSON.
 * @param {Response} response
 * @returns {Promise<ApiError>}
 */
async function errorFrom(response) {
  const text = await response.text().catch(() => "");
  let message = "";
  /** @type {Problem[]} */
  let problems = [];
  try {
    const body = JSON.parse(text);
    if (body && typeof body === "object") {
      if (typeof body.error === "string") message = body.error;
      if (Array.isArray(body.problems)) {
        problems = body.problems.map((/** @type {any} */ p) => ({
          line: typeof p?.line === "number" ? p.line : null,
          reason: String(p?.reason ?? ""),
        }));
      }
    }
  } catch {
    message = text.trim().slice(0, 300);
  }
  if (!message) {
    message = response.status === 413 ? "the file is larger than the server accepts" : `HTTP ${response.status} ${response.statusText}`;
  }
  const wait = Number(response.headers.get("Retry-After"));
  return new ApiError(response.status, message, problems, Number.isFinite(wait) && wait >= 0 ? wait : null);
}

/** Client for one session's part of the API. */
export class SessionApi {
  /** @param {string} token */
  constructor(token) {
    this.token = token;
    this.base = `/api/s/${encodeURIComponent(token)}`;
  }

  /**
   * @param {string} path below the session base
   * @param {RequestInit} [init]
   * @returns {Promise<any>}
   */
  async request(path, init) {
    let response;
    try {
      response = await fetch(this.base + path, {
        ...init,
        headers: { Accept: "application/json", ...(init?.headers ?? {}) },
      });
    } catch (e) {
      // A request the page itself stopped is not a network failure.
      if (e instanceof DOMException && e.name === "AbortError") throw e;
      throw new ApiError(0, `the server could not be reached (${String(e)})`, []);
    }
    if (!response.ok) throw await errorFrom(response);
    return response.json();
  }

  /** @returns {Promise<Session>} */
  session() {
    return this.request("");
  }

  /** @returns {Promise<DatasetSummary[]>} */
  datasets() {
    return this.request("/datasets");
  }

  /**
   * @param {string | number} id
   * @returns {Promise<DatasetDetail>}
   */
  dataset(id) {
    return this.request(`/datasets/${encodeURIComponent(String(id))}`);
  }

  /**
   * Sends a file's bytes unchanged; the server parses and validates them.
   * @param {string} name dataset name
   * @param {UploadFormat} format
   * @param {Blob} body
   * @returns {Promise<DatasetSummary>}
   */
  upload(name, format, body) {
    const query = new URLSearchParams({ name, format });
    return this.request(`/datasets?${query}`, {
      method: "POST",
      headers: { "Content-Type": "application/octet-stream" },
      body,
    });
  }

  /**
   * Sends a shot-record file unchanged; the server estimates C_ij(t) from it.
   * @param {string} name dataset name
   * @param {ShotFormat} format
   * @param {Blob} body
   * @param {ShotOptions} options
   * @returns {Promise<DatasetSummary>}
   */
  uploadShots(name, format, body, options) {
    const query = new URLSearchParams({ name, format });
    for (const [key, value] of Object.entries(options)) {
      if (value !== undefined && value !== null && value !== "") query.set(key, String(value));
    }
    return this.request(`/shots?${query}`, {
      method: "POST",
      headers: { "Content-Type": "application/octet-stream" },
      body,
    });
  }

  /**
   * @param {string | number} id a dataset made from shot records
   * @param {number | null} source null: the server's default source
   * @returns {Promise<ShotView>}
   */
  shots(id, source) {
    const query = source === null ? "" : `?${new URLSearchParams({ source: String(source) })}`;
    return this.request(`/datasets/${encodeURIComponent(String(id))}/shots${query}`);
  }

  /**
   * Fits a coupling matrix (CSV, N × N); stores nothing.
   * @param {Blob | string} body
   * @returns {Promise<CouplingAnswer>}
   */
  couplings(body) {
    return this.request("/couplings", {
      method: "POST",
      headers: { "Content-Type": "text/csv" },
      body,
    });
  }

  /**
   * @param {string | number} id
   * @param {DatasetMeta} meta
   * @returns {Promise<DatasetSummary>}
   */
  updateMeta(id, meta) {
    return this.request(`/datasets/${encodeURIComponent(String(id))}/meta`, {
      method: "PUT",
      headers: { "Content-Type": "application/json" },
      body: JSON.stringify(meta),
    });
  }

  /** @returns {string} URL of the server-sent event stream */
  eventsUrl() {
    return `${this.base}/events`;
  }

  /**
   * @param {string} path
   * @param {unknown} body
   * @param {AbortSignal} [signal]
   * @returns {Promise<any>}
   */
  postJson(path, body, signal) {
    return this.request(path, {
      method: "POST",
      headers: { "Content-Type": "application/json" },
      body: JSON.stringify(body),
      ...(signal ? { signal } : {}),
    });
  }

  /** @returns {Promise<LogEntry[]>} oldest first */
  log() {
    return this.request("/log");
  }

  /**
   * Pins an entry (a fit, a note or a retraction).
   * @param {PinRequest} entry
   * @returns {Promise<LogEntry>}
   */
  pin(entry) {
    return this.postJson("/log", entry);
  }

  /**
   * Runs a fit on the server. Resolves when it is done; a cancelled fit
   * rejects with status 409, a busy server with 429 and `retryAfter`.
   * @param {string | number} id dataset
   * @param {FitRequest} request
   * @returns {Promise<FitResult>}
   */
  fit(id, request) {
    return this.postJson(`/datasets/${encodeURIComponent(String(id))}/fits`, request);
  }

  /**
   * @param {string} job the id given with the fit
   * @returns {Promise<unknown>}
   */
  cancelJob(job) {
    return this.postJson(`/jobs/${encodeURIComponent(job)}/cancel`, {});
  }

  /**
   * The collapse quality S at one z (fast; called while a slider moves).
   * @param {string | number} id
   * @param {number} z
   * @param {FitWindows} windows
   * @returns {Promise<CollapseQualityAnswer>}
   */
  collapseQuality(id, z, windows) {
    const query = new URLSearchParams({ z: String(z) });
    appendWindows(query, windows);
    return this.request(`/datasets/${encodeURIComponent(String(id))}/collapse-quality?${query}`);
  }

  /**
   * @param {number} mu
   * @param {number} D
   * @param {number} uMin
   * @param {number} uMax
   * @param {number} n
   * @returns {Promise<ScalingFunction>}
   */
  scalingFunction(mu, D, uMin, uMax, n) {
    const query = new URLSearchParams({ mu: String(mu), D: String(D), u_min: String(uMin), u_max: String(uMax), n: String(n) });
    return this.request(`/scaling-function?${query}`);
  }

  /**
   * @param {string | number} id
   * @param {TheoryRequest} request
   * @param {AbortSignal} [signal]
   * @returns {Promise<TheoryResult>}
   */
  theory(id, request, signal) {
    return this.postJson(`/datasets/${encodeURIComponent(String(id))}/theory`, request, signal);
  }

  /**
   * What a theory request would do and how long it would take.
   * @param {string | number} id
   * @param {TheoryRequest} request
   * @param {AbortSignal} [signal]
   * @returns {Promise<TheoryPlan>}
   */
  theoryPlan(id, request, signal) {
    return this.postJson(`/datasets/${encodeURIComponent(String(id))}/theory`, { ...request, plan: true }, signal);
  }

  /** @returns {Promise<ComparisonRow[]>} */
  comparison() {
    return this.request("/comparison");
  }

  /** @returns {string} */
  logCsvUrl() {
    return `${this.base}/log.csv`;
  }

  /** @returns {string} */
  logJsonUrl() {
    return `${this.base}/log.json`;
  }

  /** @returns {string} */
  comparisonCsvUrl() {
    return `${this.base}/comparison.csv`;
  }

  /**
   * A pinned fit's fitted curves or residual map as CSV.
   * @param {number} entry
   * @param {"curves" | "residuals"} table
   * @returns {string}
   */
  fitTableCsvUrl(entry, table) {
    return `${this.base}/log/${encodeURIComponent(String(entry))}/${table}.csv`;
  }

  /** @returns {string} */
  reportUrl() {
    return `${this.base}/report.html`;
  }

  /** The whole session as one archive file. @returns {string} */
  archiveUrl() {
    return `${this.base}/archive`;
  }
}

/**
 * Adds the set bounds of a window to a query string.
 * @param {URLSearchParams} query
 * @param {FitWindows} windows
 */
function appendWindows(query, windows) {
  for (const key of /** @type {const} */ (["t_min", "t_max", "x_max"])) {
    const v = windows[key];
    if (v !== null && v !== undefined) query.set(key, String(v));
  }
}

/**
 * Guesses the upload format from a file name, the same way the server's
 * command line does: csv, tsv and txt are delimited text.
 * @param {string} fileName
 * @returns {UploadFormat | null}
 */
export function guessFormat(fileName) {
  const dot = fileName.lastIndexOf(".");
  if (dot < 0) return null;
  const ext = fileName.slice(dot + 1).toLowerCase();
  if (ext === "csv" || ext === "tsv" || ext === "txt") return "csv";
  if (ext === "npy" || ext === "npz" || ext === "json") return ext;
  return null;
}

/**
 * Guesses a shot-record format from a file name.
 * @param {string} fileName
 * @returns {ShotFormat | null}
 */
export function guessShotFormat(fileName) {
  const ext = fileName.slice(fileName.lastIndexOf(".") + 1).toLowerCase();
  if (ext === "csv" || ext === "txt") return "csv";
  if (ext === "npz") return "npz";
  if (ext === "h5" || ext === "hdf5") return "h5";
  return null;
}

/**
 * A dataset name from a file name: the name without its extension.
 * @param {string} fileName
 * @returns {string}
 */
export function nameFromFile(fileName) {
  const dot = fileName.lastIndexOf(".");
  const stem = dot > 0 ? fileName.slice(0, dot) : fileName;
  return stem.trim() || "upload";
}
