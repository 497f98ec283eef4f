// Browser end-to-end check of the spreadscope dashboard against a running server.
//
//   node tests/browser/e2e.mjs --url http://127.0.0.1:PORT/s/EDIT_TOKEN \
//     --view-url http://127.0.0.1:PORT/s/VIEW_TOKEN --upload FILE.csv --screenshot OUT.png
//
// Drives the system Chromium (/usr/bin/chromium) headless through playwright-core:
// opens the edit link, waits for the space-time heatmap, takes a 1280×800
// screenshot, uploads FILE through the file input and waits for it in the
// dataset list, then opens the view link and checks that nothing there offers
// to change the session. Prints one line per check and a closing line
// `browser: N passed, M failed`; exits 0 only when every check passed.

import { chromium } from "playwright-core";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";

const USAGE =
  "usage: node tests/browser/e2e.mjs --url EDIT_URL --view-url VIEW_URL --upload FILE --screenshot OUT.png [--timeout MS]";
const CHROMIUM = "/usr/bin/chromium";
const VIEWPORT = { width: 1280, height: 800 };

/**
 * @param {string[]} argv
 * @returns {{url: string, viewUrl: string, upload: string, screenshot: string, timeout: number}}
 */
function parseArgs(argv) {
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

let passed = 0;
let failed = 0;

/**
 * Runs one named check; a thrown error fails it with its message.
 * @param {string} name
 * @param {() => Promise<void>} body
 * @returns {Promise<boolean>}
 */
async function check(name, body) {
  try {
    await body();
    passed += 1;
    console.log(`ok      ${name}`);
    return true;
  } catch (e) {
    failed += 1;
    const message = e instanceof Error ? e.message.split("\n").slice(0, 6).join("\n        ") : String(e);
    console.log(`FAILED  ${name}\n        ${message}`);
    return false;
  }
}

/**
 * Collects script errors, failed requests and CSP violations a page reports.
 * @param {import("playwright-core").Page} page
 * @param {string[]} sink
 */
function watchErrors(page, sink) {
  page.on("pageerror", (err) => sink.push(`uncaught: ${err.message}`));
  page.on("console", (msg) => {
    if (msg.type() === "error") sink.push(`console: ${msg.text()}`);
  });
  page.on("requestfailed", (req) => {
    // An event stream cut when the page closes is not a failure of the page.
    if (req.url().endsWith("/events")) return;
    sink.push(`request failed: ${req.method()} ${req.url()} (${req.failure()?.errorText ?? "?"})`);
  });
}

/**
 * Waits until Plotly has drawn a heatmap into #view-map: the container carries
 * `js-plotly-plot` and holds the heatmap layer's raster image (SVG `image`)
 * or a canvas.
 * @param {import("playwright-core").Page} page
 * @param {number} timeout
 */
async function waitForHeatmap(page, timeout) {
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

async function main() {
  const args = parseArgs(process.argv.slice(2));
  if (!fs.existsSync(CHROMIUM)) throw new Error(`${CHROMIUM} not found (apt-get install -y chromium)`);
  const profile = fs.mkdtempSync(path.join(os.tmpdir(), "spreadscope-e2e-"));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    viewport: VIEWPORT,
    deviceScaleFactor: 1,
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
  context.setDefaultTimeout(args.timeout);
  const uploadName = path.basename(args.upload).replace(/\.[^.]+$/, "");

  try {
    /** @type {string[]} */
    const editErrors = [];
    const page = context.pages()[0] ?? (await context.newPage());
    watchErrors(page, editErrors);

    const opened = await check("edit link opens the dashboard", async () => {
      const response = await page.goto(args.url, { waitUntil: "domcontentloaded" });
      if (!response || !response.ok()) throw new Error(`GET ${args.url} answered ${response?.status() ?? "nothing"}`);
      await page.waitForFunction(() => {
        const h1 = document.querySelector("#session-name");
        return h1 && h1.textContent && !h1.textContent.startsWith("Loading");
      });
      const badge = (await page.locator("#access-badge").textContent())?.trim();
      if (badge !== "can edit") throw new Error(`access badge says "${badge}", expected "can edit"`);
    });

    if (opened) {
      await check("dataset list shows the session's datasets", async () => {
        await page.locator("#dataset-list li[data-dataset-id]").first().waitFor();
      });

      await check("space-time heatmap is drawn", async () => {
        await waitForHeatmap(page, args.timeout);
      });

      await check("the other three views are drawn or say why not", async () => {
        for (const view of ["slices", "auto", "sum"]) {
          await page.waitForFunction(
            (v) => {
              const drawn = document.querySelector(`#view-${v}.js-plotly-plot .main-svg`);
              const note = document.querySelector(`#note-${v}`);
              return Boolean(drawn) || Boolean(note && !note.hasAttribute("hidden") && note.textContent);
            },
            view,
          );
        }
      });

      await check(`screenshot written to ${args.screenshot}`, async () => {
        fs.mkdirSync(path.dirname(path.resolve(args.screenshot)), { recursive: true });
        await page.screenshot({ path: args.screenshot, fullPage: false });
        const size = fs.statSync(args.screenshot).size;
        if (size < 10000) throw new Error(`screenshot is only ${size} bytes`);
      });

      // A second reader follows the session from the view link while the
      // upload happens, to check that live updates reach open pages.
      const follower = await context.newPage();
      watchErrors(follower, editErrors);
      const following = await check("a second reader on the view link is connected for live updates", async () => {
        await follower.goto(args.viewUrl, { waitUntil: "domcontentloaded" });
        await follower.locator("#dataset-list li[data-dataset-id]").first().waitFor();
        await follower.waitForFunction(
          () => document.querySelector("#live-status")?.getAttribute("data-state") === "live",
        );
      });

      /** Id of the dataset the upload created, once the list shows it. @type {string | null} */
      let newId = null;
      const uploaded = await check(`upload of ${path.basename(args.upload)} appears in the dataset list`, async () => {
        const before = await page.locator("#dataset-list li[data-dataset-id]").evaluateAll((items) =>
          items.map((li) => li.getAttribute("data-dataset-id")),
        );
        await page.setInputFiles("#upload-input", args.upload);
        const handle = await page.waitForFunction(
          ({ before, name }) => {
            const problems = document.querySelector("#problems");
            if (problems && !problems.hasAttribute("hidden")) return "rejected";
            const fresh = Array.from(document.querySelectorAll("#dataset-list li[data-dataset-id]")).find(
              (li) => !before.includes(li.getAttribute("data-dataset-id")) && li.querySelector(".ds-name")?.textContent === name,
            );
            return fresh ? `id:${fresh.getAttribute("data-dataset-id")}` : false;
          },
          { before, name: uploadName },
        );
        const outcome = String(await handle.jsonValue());
        if (outcome === "rejected") {
          throw new Error(`the server rejected the file:\n${(await page.locator("#problems").innerText()).trim()}`);
        }
        newId = outcome.slice(3);
        // The new dataset becomes the chosen one and its heatmap is drawn.
        await page.locator(`#dataset-list li.is-selected[data-dataset-id="${newId}"]`).waitFor();
        await page.waitForFunction((name) => document.querySelector("#dataset-title")?.textContent === name, uploadName);
        await waitForHeatmap(page, args.timeout);
      });

      if (uploaded && newId !== null) {
        const id = newId;
        if (following) {
          await check("the open view page shows the upload without reloading (live update)", async () => {
            await follower.locator(`#dataset-list li[data-dataset-id="${id}"]`).waitFor();
          });
        }

        await check("metadata of the upload can be edited and saved", async () => {
          const platform = "e2e check platform";
          await page.fill("#meta-platform", platform);
          await page.fill("#meta-alpha", "1.25");
          await page.click("#meta-save");
          await page.waitForFunction(() => {
            const kind = document.querySelector("#meta-status")?.getAttribute("data-kind");
            return kind === "ok" || kind === "error";
          });
          const status = ((await page.locator("#meta-status").textContent()) ?? "").trim();
          if (status !== "Saved.") throw new Error(`the form says "${status}"`);
          const item = page.locator(`#dataset-list li[data-dataset-id="${id}"]`);
          await item.filter({ hasText: platform }).filter({ hasText: "α = 1.25" }).waitFor();
          // The other reader sees the change too.
          if (following) {
            await follower.locator(`#dataset-list li[data-dataset-id="${id}"]`).filter({ hasText: platform }).waitFor();
          }
        });
      }
      await follower.close();

      await check("no script errors or blocked resources on the edit page", async () => {
        if (editErrors.length > 0) throw new Error(editErrors.join("\n"));
      });
    }

    /** @type {string[]} */
    const viewErrors = [];
    const viewPage = await context.newPage();
    watchErrors(viewPage, viewErrors);
    await check("view link opens read-only: no upload, no metadata form", async () => {
      const response = await viewPage.goto(args.viewUrl, { waitUntil: "domcontentloaded" });
      if (!response || !response.ok()) throw new Error(`GET ${args.viewUrl} answered ${response?.status() ?? "nothing"}`);
      await viewPage.locator("#access-badge").waitFor({ state: "visible" });
      const badge = (await viewPage.locator("#access-badge").textContent())?.trim();
      if (badge !== "view only") throw new Error(`access badge says "${badge}", expected "view only"`);
      await waitForHeatmap(viewPage, args.timeout);
      if (await viewPage.locator("#upload-input").isVisible()) throw new Error("#upload-input is visible");
      if (await viewPage.locator("#drop-zone").isVisible()) throw new Error("#drop-zone is visible");
      if (await viewPage.locator("#meta-form").isVisible()) throw new Error("#meta-form is visible");
      if (await viewPage.locator("#edit-url-text").isVisible()) throw new Error("the edit link is shown to a view-only link");
    });

    await check("view link lists the uploaded dataset too", async () => {
      await viewPage.waitForFunction(
        (name) =>
          Array.from(document.querySelectorAll("#dataset-list .ds-name")).some((n) => n.textContent === name),
        uploadName,
      );
    });

    await check("no script errors or blocked resources on the view page", async () => {
      if (viewErrors.length > 0) throw new Error(viewErrors.join("\n"));
    });
  } finally {
    await context.close();
    fs.rmSync(profile, { recursive: true, force: true });
  }
}

main()
  .catch((e) => {
    failed += 1;
    console.log(`FAILED  could not run the browser checks: ${e instanceof Error ? e.message : String(e)}`);
  })
  .finally(() => {
    console.log(`browser: ${passed} passed, ${failed} failed`);
    process.exitCode = failed === 0 ? 0 : 1;
  });
