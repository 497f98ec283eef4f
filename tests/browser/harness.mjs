// Shared machinery of the browser checks: arguments, the check runner and
// its tally, error collection from pages, fixtures and helpers that call the
// API from inside a page, screenshots and fresh browser profiles.

import { chromium } from "playwright-core";
import fs from "node:fs";

export const USAGE =
  "usage: node tests/browser/e2e.mjs --url EDIT_URL --view-url VIEW_URL --upload FILE --screenshot OUT.png [--timeout MS]";
export const CHROMIUM = "/usr/bin/chromium";
export const VIEWPORT = { width: 1280, height: 800 };
/** Grid of the synthetic map the collapse is timed on: the size named in the design's speed target. */
export const SLICES = 60;
export const SITES = 101;

/**
 * @param {string[]} argv
 * @returns {{url: string, viewUrl: string, upload: string, screenshot: string, timeout: number}}
 */
export function parseArgs(argv) {
  /** @type {Record<string, string>} */
  const opts = {};
  for (let i = 0; i < argv.length; i += 1) {
    const key = argv[i];
    if (!key.startsWith("--")) throw new Error(`unexpected argument "${key}"\n${USAGE}`);
    const value = argv[i + 1];
    if (value === undefined || value.startsWith("--")) throw new Error(`${key} needs a value\n${USAGE}`);
    opts[key.slice(2)] = value;
    i += 1;
  }
  for (const needed of ["url", "view-url", "upload", "screenshot"]) {
    if (!opts[needed]) throw new Error(`missing --${needed}\n${USAGE}`);
  }
  for (const known of Object.keys(opts)) {
    if (!["url", "view-url", "upload", "screenshot", "timeout"].includes(known)) {
      throw new Error(`unknown option --${known}\n${USAGE}`);
    }
  }
  if (!fs.existsSync(opts.upload)) throw new Error(`--upload: file ${opts.upload} does not exist`);
  const timeout = opts.timeout ? Number(opts.timeout) : 30000;
  if (!Number.isFinite(timeout) || timeout <= 0) throw new Error(`--timeout: "${opts.timeout}" is not a positive number of milliseconds`);
  return { url: opts.url, viewUrl: opts["view-url"], upload: opts.upload, screenshot: opts.screenshot, timeout };
}

/** Counts of the checks run so far. */
export const tally = { passed: 0, failed: 0 };
/** @type {string[]} */
export const pending = [];
/** @type {string[]} */
export const measurements = [];

/**
 * Runs one named check; a thrown error fails it with its message.
 * @param {string} name
 * @param {() => Promise<void>} body
 * @returns {Promise<boolean>}
 */
export async function check(name, body) {
  try {
    await body();
    tally.passed += 1;
    console.log(`ok      ${name}`);
    return true;
  } catch (e) {
    tally.failed += 1;
    const message = e instanceof Error ? e.message.split("\n").slice(0, 8).join("\n        ") : String(e);
    console.log(`FAILED  ${name}\n        ${message}`);
    return false;
  }
}

/**
 * Records a check that cannot run because the server does not offer the
 * route yet.
 * @param {string} name
 * @param {string} why
 */
export function skipPending(name, why) {
  pending.push(`${name} (${why})`);
  console.log(`pending ${name}: ${why}`);
}

/**
 * @param {boolean} condition
 * @param {string} message
 */
export function assert(condition, message) {
  if (!condition) throw new Error(message);
}

/**
 * Routes the server does not offer yet (path patterns): the browser's own
 * "failed to load" messages for them are expected while they are pending.
 * @type {RegExp[]}
 */
export const missingRoutes = [];

/**
 * Failed loads a check causes on purpose (a cancelled fit answers 409).
 * @type {Array<{text: RegExp, url: RegExp}>}
 */
export const expectedFailures = [];

/**
 * Collects script errors, failed requests and CSP violations a page reports.
 * A failed load of a route listed in `missingRoutes` is left out when the
 * errors are read (see `errorsOf`).
 * @param {import("playwright-core").Page} page
 * @param {Array<{text: string, url: string}>} sink
 */
export function watchErrors(page, sink) {
  page.on("pageerror", (err) => sink.push({ text: `uncaught: ${err.message}`, url: "" }));
  page.on("console", (msg) => {
    if (msg.type() === "error") sink.push({ text: `console: ${msg.text()}`, url: msg.location().url ?? "" });
  });
  page.on("requestfailed", (req) => {
    // An event stream cut when the page closes, a download, and a theory
    // request the page itself stopped are not failures of the page.
    const url = req.url();
    if (url.endsWith("/events") || req.failure()?.errorText === "net::ERR_ABORTED") return;
    sink.push({ text: `request failed: ${req.method()} ${url} (${req.failure()?.errorText ?? "?"})`, url });
  });
}

/**
 * The errors a page reported, less the expected failures of pending routes.
 * @param {Array<{text: string, url: string}>} sink
 * @returns {string[]}
 */
export function errorsOf(sink) {
  return sink
    .filter((e) => !(e.text.startsWith("console: Failed to load resource") && missingRoutes.some((r) => r.test(e.url))))
    .filter((e) => !expectedFailures.some((f) => f.text.test(e.text) && f.url.test(e.url)))
    .map((e) => e.text);
}

/**
 * Waits until Plotly has drawn a heatmap into #view-map: the container carries
 * `js-plotly-plot` and holds the heatmap layer's raster image (SVG `image`)
 * or a canvas.
 * @param {import("playwright-core").Page} page
 * @param {number} timeout
 */
export async function waitForHeatmap(page, timeout) {
  await page.waitForFunction(
    () => {
      const root = document.querySelector("#view-map.js-plotly-plot, #view-map .js-plotly-plot");
      if (!root) return false;
      return Boolean(root.querySelector(".heatmaplayer image, .hm image, canvas"));
    },
    undefined,
    { timeout },
  );
}

/**
 * The synthetic map the collapse is checked and timed on: the diffusive
 * profile C(x,t) = exp(−x²/(4Dt)) / √(4πDt) with D = 0.5 (the lattice
 * continuum limit of a nearest-neighbour walk; common practice, no source),
 * SITES sites around the source and SLICES geometric times from 0.5 to 50,
 * with seeded noise of about 5e-4 and that error in the err column. Marked
 * synthetic in its name and metadata.
 * @returns {string} long CSV `x,t,C,err`
 */
export function syntheticDiffusionCsv() {
  const D = 0.5;
  const half = (SITES - 1) / 2;
  // Park–Miller minimal standard generator, seeded, so the file is the same every run.
  let seed = 20240601;
  const uniform = () => {
    seed = (seed * 16807) % 2147483647;
    return seed / 2147483647;
  };
  const lines = ["x,t,C,err"];
  for (let k = 0; k < SLICES; k += 1) {
    const t = 0.5 * Math.pow(100, k / (SLICES - 1));
    for (let x = -half; x <= half; x += 1) {
      const c = Math.exp((-x * x) / (4 * D * t)) / Math.sqrt(4 * Math.PI * D * t);
      const noise = 5e-4 * (uniform() + uniform() + uniform() - 1.5) * 2;
      lines.push(`${x},${t.toPrecision(8)},${(c + noise).toPrecision(8)},5e-4`);
    }
  }
  return lines.join("\n") + "\n";
}

/**
 * Calls the session's API from inside a page (same origin, no CORS).
 * @param {import("playwright-core").Page} page
 * @param {string} method
 * @param {string} apiPath path below /api/s/{token}
 * @param {unknown} [body] JSON body, or a string sent as it is
 * @returns {Promise<{status: number, json: any, text: string}>}
 */
export async function callApi(page, method, apiPath, body) {
  return page.evaluate(
    async ({ method, apiPath, body }) => {
      const token = decodeURIComponent(location.pathname.split("/").filter(Boolean).pop() ?? "");
      const init = /** @type {RequestInit} */ ({ method, headers: {} });
      if (body !== undefined) {
        init.body = typeof body === "string" ? body : JSON.stringify(body);
        init.headers = { "Content-Type": typeof body === "string" ? "application/octet-stream" : "application/json" };
      }
      const response = await fetch(`/api/s/${token}${apiPath}`, init);
      const text = await response.text();
      let json = null;
      try {
        json = JSON.parse(text);
      } catch {
        json = null;
      }
      return { status: response.status, json, text: text.slice(0, 2000) };
    },
    { method, apiPath, body },
  );
}

/**
 * Whether the server offers a route: an unknown route answers 404 with
 * `{"error":"not found"}`; a known one answers anything else to this probe.
 * @param {import("playwright-core").Page} page
 * @param {string} method
 * @param {string} apiPath
 * @param {unknown} [body]
 * @returns {Promise<boolean>}
 */
export async function offers(page, method, apiPath, body) {
  const answer = await callApi(page, method, apiPath, body);
  return !(answer.status === 404 && answer.json && answer.json.error === "not found");
}

/**
 * A screenshot next to the main one: OUT.png → OUT-name.png.
 * @param {import("playwright-core").Page} page
 * @param {string} main
 * @param {string} name
 * @returns {Promise<string>}
 */
export async function sideShot(page, main, name) {
  const file = main.replace(/(\.png)?$/i, `-${name}.png`);
  // From the top of the page, as a person arriving sees it.
  await page.evaluate(() => window.scrollTo(0, 0));
  await page.screenshot({ path: file, fullPage: false });
  return file;
}

/**
 * @param {number[]} values
 * @param {number} q quantile in [0, 1], nearest rank
 * @returns {number}
 */
export function quantile(values, q) {
  const sorted = [...values].sort((a, b) => a - b);
  const rank = Math.min(sorted.length - 1, Math.max(0, Math.ceil(q * sorted.length) - 1));
  return sorted[rank] ?? Number.NaN;
}

/**
 * @param {string} profile
 * @param {number} timeout
 * @returns {Promise<import("playwright-core").BrowserContext>}
 */
export async function openProfile(profile, timeout) {
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    viewport: VIEWPORT,
    deviceScaleFactor: 1,
    acceptDownloads: true,
    args: [
      "--no-sandbox",
      "--disable-gpu",
      "--disable-background-networking",
      "--disable-component-update",
      "--no-first-run",
      "--disable-sync",
      "--disable-quic",
    ],
  });
  context.setDefaultTimeout(timeout);
  return context;
}
