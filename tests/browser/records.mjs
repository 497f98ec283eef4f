// Checks of the shot-record and coupling views: a shot file added from the
// upload box and its site-resolved view, coupling matrices fitted and drawn,
// a measured matrix driving a spin-chain overlay, and a ragged one refused.

import fs from "node:fs";
import path from "node:path";

import {
  assert,
  callApi,
  check,
  expectedFailures,
  missingRoutes,
  offers,
  sideShot,
  skipPending,
} from "./harness.mjs";

/**
 * @param {{page: import("playwright-core").Page, editContext: import("playwright-core").BrowserContext, args: {url: string, timeout: number, screenshot: string}, work: string, gid: string, shots: string[]}} ctx
 */
export async function shotAndCouplingChecks({ page, editContext, args, work, gid, shots }) {
    // ------------------------------------------- shot records and couplings
    const shotFile = path.join(path.dirname(new URL(import.meta.url).pathname), "..", "reference", "shots", "shots.csv");
    /** Id of the dataset made from shot records. @type {string | null} */
    let shotId = null;
    await check("a shot-record file with source 0 is added from the upload box", async () => {
      // A fresh page without the fit windows chosen above: they belong to the
      // timed map, and the small shot dataset has no time inside them.
      await page.goto("about:blank");
      await page.goto(`${args.url.replace(/#.*$/, "")}#dataset=${gid}&view=map`, { waitUntil: "domcontentloaded" });
      await page.waitForFunction((name) => document.querySelector("#dataset-title")?.textContent === name, "synthetic diffusion 60x101 (e2e)");
      await page.click("#desk-tab-data");
      await page.click("#shots-box > summary");
      await page.check("#shots-one");
      await page.fill("#shots-source", "0");
      const before = await page.locator("#dataset-list li[data-dataset-id]").evaluateAll((items) => items.map((li) => li.getAttribute("data-dataset-id")));
      await page.setInputFiles("#shots-input", shotFile);
      const handle = await page.waitForFunction(
        (before) => {
          const problems = document.querySelector("#problems");
          if (problems && !problems.hasAttribute("hidden")) return "rejected";
          const fresh = Array.from(document.querySelectorAll("#dataset-list li[data-dataset-id]")).find((li) => !before.includes(li.getAttribute("data-dataset-id")));
          return fresh ? `id:${fresh.getAttribute("data-dataset-id")}` : false;
        },
        before,
      );
      const outcome = String(await handle.jsonValue());
      if (outcome === "rejected") throw new Error(`the server rejected the shots:\n${(await page.locator("#problems").innerText()).trim()}`);
      shotId = outcome.slice(3);
      await page.locator(`#dataset-list li.is-selected[data-dataset-id="${shotId}"]`).waitFor();
      const summary = await callApi(page, "GET", `/datasets/${shotId}`);
      assert(String(summary.json?.format).startsWith("shots-"), `the new dataset's format is ${summary.json?.format}`);
    });

    if (shotId !== null) {
      const sid = /** @type {string} */ (shotId);
      const shotProbe = await editContext.newPage();
      await shotProbe.goto(args.url.replace(/#.*$/, ""), { waitUntil: "domcontentloaded" });
      const hasShotView = await offers(shotProbe, "GET", `/datasets/${sid}/shots?source=0`);
      await shotProbe.close();
      if (!hasShotView) missingRoutes.push(/\/datasets\/[^/]+\/shots(\?|$)/);
      if (hasShotView) {
        await check("the site-resolved view draws C_i0(t), its sum rule with the departing times marked, and the warnings", async () => {
          await page.locator("#tab-sites:not([hidden])").waitFor();
          await page.click("#tab-sites");
          await page.waitForFunction(() => document.querySelector("#view-sites.js-plotly-plot .heatmaplayer image, #view-sites.js-plotly-plot canvas") !== null);
          await page.waitForFunction(() => document.querySelector("#view-sites-sum.js-plotly-plot .main-svg") !== null);
          assert((await page.locator("#sites-source").inputValue()) === "0", "the source selector does not show j = 0");
          // What the server says, read beside the page: the page must draw the same times and flags.
          const served = await callApi(page, "GET", `/datasets/${sid}/shots?source=0`);
          const times = served.json.times.length;
          const departs = served.json.sum_rule.filter((/** @type {any} */ p) => p.departs).length;
          const drawn = await page.evaluate(() => {
            const gd = /** @type {any} */ (document.querySelector("#view-sites-sum"));
            const map = /** @type {any} */ (document.querySelector("#view-sites"));
            return { sum: gd.data[1].x.length, departs: gd.data[2].x.length, rows: map.data[0].z.length, cols: map.data[0].z[0].length };
          });
          assert(drawn.sum === times && drawn.rows === times, `drawn ${drawn.sum} sums and ${drawn.rows} map rows for ${times} times`);
          assert(drawn.cols === served.json.sites, `the map has ${drawn.cols} columns for ${served.json.sites} sites`);
          assert(drawn.departs === departs, `${drawn.departs} departing points marked, the server flags ${departs}`);
          const warnings = await page.locator("#sites-warnings li").count();
          assert(warnings === served.json.warnings.length, `${warnings} warnings listed, the server gave ${served.json.warnings.length}`);
          await page.selectOption("#sites-source", "1");
          await page.waitForFunction(() => (document.querySelector("#caption-sites")?.textContent ?? "").startsWith("Source j = 1"));
          shots.push(await sideShot(page, args.screenshot, "sites"));
        });
      } else {
        skipPending("the site-resolved view of shot records", "the server has no …/datasets/{id}/shots route yet");
      }
      // Back to the map of the timed collapse, so the checks below see the page as before.
      await page.goto("about:blank");
      await page.goto(`${args.url.replace(/#.*$/, "")}#dataset=${gid}&view=map`, { waitUntil: "domcontentloaded" });
      await page.waitForFunction((name) => document.querySelector("#dataset-title")?.textContent === name, "synthetic diffusion 60x101 (e2e)");
    }

    const couplingProbe = await editContext.newPage();
    await couplingProbe.goto(args.url.replace(/#.*$/, ""), { waitUntil: "domcontentloaded" });
    const hasCouplings = await offers(couplingProbe, "POST", "/couplings", "");
    await couplingProbe.close();
    if (hasCouplings) {
      await check("a 6 × 6 matrix of 1/|i−j|^1.5 is fitted with α ≈ 1.5 and drawn as a map and against distance", async () => {
        // Exact power law J_ij = |i − j|^−1.5 with J_ii = 0, built here: the
        // fitted α must come out as 1.5 (construction, no other source).
        const lines = [];
        for (let i = 0; i < 6; i += 1) {
          const row = [];
          for (let j = 0; j < 6; j += 1) row.push(i === j ? "0" : String(1 / Math.pow(Math.abs(i - j), 1.5)));
          lines.push(row.join(","));
        }
        const file = path.join(work, "couplings-power-1.5.csv");
        fs.writeFileSync(file, lines.join("\n") + "\n");
        await page.click("#tab-couplings");
        await page.setInputFiles("#couplings-input", file);
        const alphaCell = page.locator('#couplings-fit dd[data-term="α"]');
        await alphaCell.waitFor();
        const alpha = Number(/^([0-9.]+)/.exec((await alphaCell.innerText()).trim())?.[1]);
        assert(Math.abs(alpha - 1.5) < 0.01, `α shown as ${await alphaCell.innerText()}`);
        assert((await page.locator('#couplings-fit dd[data-term="J"]').innerText()).startsWith("1"), "J is not shown as 1");
        await page.waitForFunction(() => document.querySelector("#view-couplings.js-plotly-plot .heatmaplayer image, #view-couplings.js-plotly-plot canvas") !== null);
        const decay = await page.evaluate(() => {
          const gd = /** @type {any} */ (document.querySelector("#view-couplings-decay"));
          return { points: gd.data[0].x.length, line: gd.data[1].y.length, xType: gd.layout.xaxis.type, yType: gd.layout.yaxis.type };
        });
        // 15 pairs above the diagonal of a 6 × 6 matrix.
        assert(decay.points === 15 && decay.line > 2, `decay plot holds ${decay.points} points and a ${decay.line}-point line`);
        assert(decay.xType === "log" && decay.yType === "log", `decay axes are ${decay.xType}/${decay.yType}`);
        shots.push(await sideShot(page, args.screenshot, "couplings"));
      });
      await check("a measured 51 × 51 coupling matrix drives a spin-chain overlay at 51 sites, said before it runs", async () => {
        // A power law 1/|i−j|^1.2 with a seeded ±5 % wobble standing in for a
        // measured matrix (synthetic, made here).
        let seed = 7;
        const wobble = () => {
          seed = (seed * 16807) % 2147483647;
          return 0.95 + 0.1 * (seed / 2147483647);
        };
        const n = 51;
        const m = Array.from({ length: n }, () => Array(n).fill(0));
        for (let i = 0; i < n; i += 1) {
          for (let j = i + 1; j < n; j += 1) m[i][j] = m[j][i] = wobble() / Math.pow(j - i, 1.2);
        }
        const file = path.join(work, "couplings-measured-51.csv");
        fs.writeFileSync(file, m.map((row) => row.join(",")).join("\n") + "\n");
        await page.click("#tab-couplings");
        await page.setInputFiles("#couplings-input", file);
        await page.locator("#couplings-status[data-kind='ok']").waitFor({ timeout: args.timeout });
        await page.click("#desk-tab-theory");
        await page.check('input[name="theory-model"][value="spin_chain"]');
        await page.check("#theory-use-matrix");
        await page.fill("#theory-trajectories", "32");
        await page.waitForFunction(() => /semiclassical DTWA, 32 trajectories on 51 sites/.test(document.querySelector("#theory-plan")?.textContent ?? ""), undefined, { timeout: args.timeout });
        await page.click("#theory-run");
        await page.locator("#theory-status[data-kind='ok'], #theory-status[data-kind='error']").waitFor({ timeout: Math.max(args.timeout, 120000) });
        const status = await page.locator("#theory-status").innerText();
        assert(status.startsWith("Drawn"), `the theory panel says "${status}"`);
        const summary = await page.locator("#theory-summary").innerText();
        assert(summary.includes("from the coupling matrix") && summary.includes("51"), `the overlay summary says "${summary}"`);
        await page.uncheck("#theory-use-matrix");
        await page.fill("#theory-trajectories", "");
        await page.check('input[name="theory-model"][value="lattice_walk"]');
        await page.click("#theory-clear");
      });
      await check("a ragged coupling matrix is refused with its line named", async () => {
        expectedFailures.push({ text: /Failed to load resource/, url: /\/couplings$/ });
        const file = path.join(work, "couplings-ragged.csv");
        fs.writeFileSync(file, "0,1,0.5\n1,0\n0.5,1,0\n");
        await page.setInputFiles("#couplings-input", file);
        const box = page.locator("#couplings-problems:not([hidden])");
        await box.waitFor();
        const text = await box.innerText();
        assert(/line 2/.test(text), `the problems read: ${text}`);
      });
    } else {
      missingRoutes.push(/\/couplings$/);
      skipPending("the coupling-matrix fit", "the server has no …/couplings route yet");
    }

}
