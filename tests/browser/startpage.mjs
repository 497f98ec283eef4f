// Checks of the start page: the first load of the dashboard in a fresh
// profile (measured), the whole-session archive imported as a new session,
// and a session created and renamed there.

import fs from "node:fs";
import path from "node:path";

import { assert, check, measurements, openProfile } from "./harness.mjs";

/**
 * Sessions from the start page (issue 11 §6), and the first load of the
 * dashboard in a fresh profile (nothing cached), timed until the first
 * figure is drawn.
 * @param {string} origin
 * @param {string} profile
 * @param {string} dashboard
 * @param {number} timeout
 */
export async function startPageChecks(origin, profile, dashboard, timeout) {
  const context = await openProfile(profile, timeout);
  try {
    const page = context.pages()[0] ?? (await context.newPage());
    await check("first load of the dashboard in a fresh browser profile (measured)", async () => {
      // Timed in the page, from navigation start to the animation frame that
      // paints the first figure. Timing from outside would also count the
      // work the page starts right after that frame (the hidden views are
      // drawn then), since the browser answers the test only between tasks.
      await context.addInitScript(() => {
        const seen = () => {
          if (document.querySelector(".js-plotly-plot .main-svg") === null) return;
          observer.disconnect();
          requestAnimationFrame(() => {
            /** @type {any} */ (window).__firstFigure = performance.now();
          });
        };
        const observer = new MutationObserver(seen);
        observer.observe(document, { childList: true, subtree: true });
      });
      await page.goto(dashboard, { waitUntil: "domcontentloaded" });
      await page.waitForFunction(() => /** @type {any} */ (window).__firstFigure !== undefined, undefined, { timeout });
      const drawn = Math.round(await page.evaluate(() => /** @type {number} */ (/** @type {any} */ (window).__firstFigure)));
      const scripts = await page.evaluate(() =>
        performance.getEntriesByType("resource").filter((r) => r.name.includes("/vendor/")).map((r) => /** @type {PerformanceResourceTiming} */ (r).encodedBodySize),
      );
      measurements.push(`first load, navigation start to the frame that paints the first figure: ${drawn} ms (plotting bundle ${scripts.join(", ")} bytes)`);
    });
    await check("the dashboard offers the whole session as an archive, and the start page imports it as a new session", async () => {
      const href = await page.locator("#archive-link").getAttribute("href");
      assert(href !== null && href.endsWith("/archive"), `the archive link points to ${href}`);
      const response = await fetch(new URL(/** @type {string} */ (href), origin));
      assert(response.ok, `the archive answered ${response.status}`);
      const bytes = Buffer.from(await response.arrayBuffer());
      assert(bytes.subarray(0, 2).toString("latin1") === "PK", "the archive is not a zip file");
      const file = path.join(path.dirname(profile), "session-archive.zip");
      fs.writeFileSync(file, bytes);
      await page.goto(`${origin}/`, { waitUntil: "domcontentloaded" });
      const before = await page.locator("#sessions li").count();
      await page.setInputFiles("#archive-file", file);
      await page.click('#import-archive button[type="submit"]');
      await page.waitForFunction(() => (document.querySelector("#start-status")?.textContent ?? "").startsWith("Imported") || document.querySelector("#start-status")?.classList.contains("error"), undefined, { timeout });
      const status = ((await page.locator("#start-status").textContent()) ?? "").trim();
      assert(status.startsWith("Imported"), `the start page says "${status}"`);
      await page.waitForFunction((n) => document.querySelectorAll("#sessions li").length === n + 1, before, { timeout });
    });
    await check("a session is created and renamed from the start page", async () => {
      await page.goto(`${origin}/`, { waitUntil: "domcontentloaded" });
      await page.fill("#new-name", "Start-page session");
      await page.click('#new-session button[type="submit"]');
      const item = page.locator("#sessions li", { hasText: "Start-page session" });
      await item.waitFor({ timeout });
      await item.locator('[data-testid="rename"]').click();
      await item.locator('[data-testid="rename-input"]').fill("Renamed on the start page");
      await item.locator('button[type="submit"]').click();
      await page.locator('#sessions [data-testid="session-name"]', { hasText: "Renamed on the start page" }).waitFor({ timeout });
      // The list survives a reload (links kept in this browser) and opens the session.
      await page.reload({ waitUntil: "domcontentloaded" });
      const again = page.locator("#sessions li", { hasText: "Renamed on the start page" });
      await again.waitFor({ timeout });
      await again.locator("a", { hasText: "Open (edit)" }).click();
      await page.waitForFunction(() => document.querySelector("#session-name")?.textContent === "Renamed on the start page", undefined, { timeout });
    });
  } finally {
    await context.close();
  }
}
