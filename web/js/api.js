// The only module that speaks HTTP to the spreadscope server. It owns the
// shapes of the JSON the server returns (as JSDoc types) and turns every
// non-2xx answer into an ApiError carrying the server's own message and, for
// rejected uploads, its line-numbered problems. It knows nothing about the
// page's elements or about plotting.

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
 */

/** @typedef {DatasetSummary & DatasetDetailExtra} DatasetDetail */

/**
 * @typedef {object} Problem
 * @property {number | null} line
 * @property {string} reason
 */

/**
 * @typedef {object} ServerEvent
 * @property {string} kind "dataset-added" | "dataset-updated" (others are ignored)
 * @property {string | number} [id]
 */

/** Upload formats the server accepts. */
export const FORMATS = /** @type {const} */ (["csv", "npy", "npz", "json"]);

/** @typedef {typeof FORMATS[number]} UploadFormat */

/** A failed request, with what the server said about it. */
export class ApiError extends Error {
  /**
   * @param {number} status HTTP status, 0 when the server could not be reached
   * @param {string} message the server's `error` text or a description
   * @param {Problem[]} problems line-numbered problems of a rejected upload
   */
  constructor(status, message, problems) {
    super(message);
    this.name = "ApiError";
    this.status = status;
    this.problems = problems;
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
  return new ApiError(response.status, message, problems);
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
 * A dataset name from a file name: the name without its extension.
 * @param {string} fileName
 * @returns {string}
 */
export function nameFromFile(fileName) {
  const dot = fileName.lastIndexOf(".");
  const stem = dot > 0 ? fileName.slice(0, dot) : fileName;
  return stem.trim() || "upload";
}
