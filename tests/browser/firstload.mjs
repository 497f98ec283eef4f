// Measures the dashboard's first load, for the README's numbers (a
// measurement, not a test): `node tests/browser/firstload.mjs RUNS URL [URL…]`.
// Each run opens every URL in turn in a fresh browser profile (nothing
// cached), so that two servers compared side by side share the machine's
// load; `VIEWPORT=1280x720` changes the window (default 1400×900).
//
// Everything is timed in the page from navigation start: the modules run
// (DOMContentLoaded), the first dataset's answer is in, the plotting library
// has run, the map's drawing starts and how long plotly takes for it, the
// animation frame that paints the first figure, and the browser's own paint
// time of the map image (largest contentful paint). Timing from outside the
// page would also count the work the page starts right after that frame
// (the hidden views), since the browser answers the driver only between
// tasks; it is printed too, as "seen from outside".

import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { chromium } from "playwright-core";

const runs = Number(process.argv[2]);
const urls = process.argv.slice(3);
if (!(runs > 0) || urls.length === 0) {
  console.error("usage: node tests/browser/firstload.mjs RUNS URL [URL…]");
  process.exit(2);
}
const [width, height] = (process.env.VIEWPORT ?? "1400x900").split("x").map(Number);

/** What the page records about itself; runs before any of its scripts. */
function recorder() {
  /** @type {Record<string, number>} */
  const marks = {};
  /** @type {any} */ (window).__firstLoad = marks;
  new PerformanceObserver((list) => {
    for (const e of list.getEntries()) {
      const el = /** @type {any} */ (e).element;
      if (el && el.tagName.toLowerCase() === "image" && marks.painted === undefined) marks.painted = e.startTime;
    }
  }).observe({ type: "largest-contentful-paint", buffered: true });
  // The library defines the global `Plotly` when it has run; its first
  // drawing of the map is timed until plotly's promise settles.
  /** @type {any} */
  let plotly;
  Object.defineProperty(window, "Plotly", {
    configurable: true,
    get: () => plotly,
    set: (value) => {
      plotly = value;
      marks.library = performance.now();
      const react = value.react;
      value.react = function (/** @type {HTMLElement} */ el, /** @type {unknown[]} */ ...rest) {
        const first = el.id === "view-map" && marks.mapStart === undefined;
        if (first) marks.mapStart = performance.now();
        return react.call(this, el, ...rest).then((/** @type {unknown} */ drawn) => {
          if (first) marks.mapDone = performance.now();
          return drawn;
        });
      };
    },
  });
  const observer = new MutationObserver(() => {
    if (document.querySelector("#view-map .main-svg") === null) return;
    observer.disconnect();
    requestAnimationFrame(() => {
      marks.frame = performance.now();
    });
  });
  observer.observe(document, { childList: true, subtree: true });
}

/** @type {Array<Record<string, number[]>>} */
const results = urls.map(() => ({}));
for (let run = 0; run < runs; run++) {
  for (const [i, url] of urls.entries()) {
    const profile = fs.mkdtempSync(path.join(os.tmpdir(), "spreadscope-firstload-"));
    const context = await chromium.launchPersistentContext(profile, {
      executablePath: "/usr/bin/chromium",
      headless: true,
      viewport: { width, height },
      args: ["--no-sandbox", "--disable-gpu"],
    });
    try {
      await context.addInitScript(recorder);
      const page = context.pages()[0] ?? (await context.newPage());
      const started = Date.now();
      await page.goto(url, { waitUntil: "domcontentloaded" });
      await page.waitForFunction(() => /** @type {any} */ (window).__firstLoad.frame !== undefined, undefined, { timeout: 30000 });
      const outside = Date.now() - started;
      await page.waitForFunction(() => /** @type {any} */ (window).__firstLoad.painted !== undefined && /** @type {any} */ (window).__firstLoad.mapDone !== undefined, undefined, { timeout: 10000 }).catch(() => undefined);
      const m = await page.evaluate(() => {
        const marks = /** @type {any} */ (window).__firstLoad;
        const nav = /** @type {PerformanceNavigationTiming} */ (performance.getEntriesByType("navigation")[0]);
        const data = performance.getEntriesByType("resource").find((r) => /\/datasets\/\d+$/.test(r.name));
        return { ...marks, modules: nav.domContentLoadedEventEnd, data: data ? /** @type {PerformanceResourceTiming} */ (data).responseEnd : NaN };
      });
      const row = {
        "modules run (DOMContentLoaded)": m.modules,
        "first dataset in": m.data,
        "plotting library has run": m.library,
        "map drawing starts": m.mapStart,
        "map drawing takes": m.mapDone - m.mapStart,
        "frame painting the first figure": m.frame,
        "map image painted (LCP)": m.painted,
        "seen from outside": outside,
      };
      for (const [k, v] of Object.entries(row)) (results[i][k] ??= []).push(v);
      console.log(`run ${run} url ${i}: frame ${Math.round(m.frame)} ms, painted ${Math.round(m.painted)} ms, seen from outside ${outside} ms`);
    } finally {
      await context.close();
      fs.rmSync(profile, { recursive: true, force: true });
    }
  }
}

/** @param {number[]} values */
function summary(values) {
  const v = values.filter((x) => Number.isFinite(x)).sort((a, b) => a - b);
  if (v.length === 0) return "no value";
  const n = v.length;
  const median = n % 2 ? v[(n - 1) / 2] : (v[n / 2 - 1] + v[n / 2]) / 2;
  const s = (/** @type {number} */ x) => (x / 1000).toFixed(2);
  return `median ${s(median)} s (${s(v[0])}–${s(v[n - 1])}, ${n} runs)`;
}
for (const [i, url] of urls.entries()) {
  console.log(url);
  for (const [k, v] of Object.entries(results[i])) console.log(`  ${k}: ${summary(v)}`);
}
