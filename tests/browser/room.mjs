// Checks for the room: history and fragments, the several-views grid and
// presentation mode at a projector's and a large screen's size, in normal
// and large text.


import {
  assert,
  check,
  measurements,
  sideShot,
  VIEWPORT,
} from "./harness.mjs";

/**
 * @param {{page: import("playwright-core").Page, args: {url: string, timeout: number, screenshot: string}, gid: string, shots: string[]}} ctx
 */
export async function roomChecks({ page, args, gid, shots }) {
    // ------------------------------------------ the room: grid, presentation, history
    await check("Back and Forward restore the view and a typed fragment is followed, without reloading", async () => {
      await page.evaluate(() => {
        /** @type {any} */ (window).__sameDocument = true;
      });
      await page.click("#tab-map");
      await page.click("#tab-slices");
      await page.goBack();
      await page.waitForFunction(() => document.querySelector("#tab-map")?.getAttribute("aria-selected") === "true", null, { timeout: 5000 });
      await page.goForward();
      await page.waitForFunction(() => document.querySelector("#tab-slices")?.getAttribute("aria-selected") === "true", null, { timeout: 5000 });
      await page.evaluate(() => {
        const params = new URLSearchParams(window.location.hash.slice(1));
        params.set("view", "sum");
        window.location.hash = params.toString();
      });
      await page.waitForFunction(() => document.querySelector("#tab-sum")?.getAttribute("aria-selected") === "true", null, { timeout: 5000 });
      assert(await page.evaluate(() => /** @type {any} */ (window).__sameDocument === true), "the page was reloaded");
    });

    await check("a fragment naming another dataset switches to it without reloading, and a best fit runs there", async () => {
      await page.evaluate((id) => {
        window.location.hash = `dataset=${id}&view=collapse`;
      }, gid);
      await page.waitForFunction((name) => document.querySelector("#dataset-title")?.textContent === name, "synthetic diffusion 60x101 (e2e)", { timeout: 10000 });
      await page.waitForFunction(() => document.querySelector("#tab-collapse")?.getAttribute("aria-selected") === "true");
      assert(await page.evaluate(() => /** @type {any} */ (window).__sameDocument === true), "the page was reloaded");
      await page.click("#collapse-best");
      await page.waitForFunction(() => (document.querySelector("#z-band-text")?.textContent ?? "").startsWith("Best fit z = "), null, { timeout: 60000 });
    });

    /**
     * Looks at the presenting page: the figure fills the screen, the side
     * panel is gone, the banner carries z ± error; → steps to the next view.
     * @param {string} label the size and lettering, for messages
     * @param {string} tag the same, for screenshot names
     */
    const presentationShown = async (label, tag) => {
      await page.waitForTimeout(400);
      // On a loaded machine the figures may still be refitting to the new size.
      await page
        .waitForFunction(() => document.documentElement.scrollWidth <= window.innerWidth, null, { timeout: 3000 })
        .catch(() => undefined);
      const shown = await page.evaluate(() => {
        const plot = document.querySelector("#panel-collapse")?.getBoundingClientRect();
        const banner = document.querySelector("#present-banner");
        const sidebar = document.querySelector("#sidebar");
        return {
          plot: plot ? { w: plot.width, h: plot.height, bottom: plot.bottom } : null,
          banner: banner instanceof HTMLElement && !banner.hidden ? banner.innerText : null,
          sidebarShown: sidebar instanceof HTMLElement && sidebar.offsetParent !== null,
          scrollWidth: document.documentElement.scrollWidth,
          innerWidth: window.innerWidth,
          innerHeight: window.innerHeight,
        };
      });
      assert(shown.plot !== null && shown.plot.w > 0.85 * shown.innerWidth, `the figure is ${shown.plot?.w} px wide of ${shown.innerWidth}`);
      assert(shown.plot !== null && shown.plot.h > 0.6 * shown.innerHeight && shown.plot.bottom <= shown.innerHeight + 1, "the figure does not fill the screen");
      assert(!shown.sidebarShown, "the side panel is still shown");
      assert(shown.scrollWidth <= shown.innerWidth, `content ${shown.scrollWidth} px wide`);
      const banner = shown.banner ?? "";
      const z = banner.match(/z = (\d+\.\d+) ±\s?(\d+\.?\d*)/);
      assert(z !== null, `no z ± error in the banner: ${JSON.stringify(banner)}`);
      const [zValue, zErr] = [Number(z[1]), Number(z[2])];
      assert(zValue > 0.5 && zValue < 3 && zErr > 0 && zErr < 1, `banner z = ${zValue} ± ${zErr}`);
      measurements.push(`banner at ${label}: ${banner.replace(/\s+/g, " ")}`);
      // The best fit above left its S(z) scan beside the collapse; the
      // presentation's larger lettering must not squeeze it into a sliver.
      await page
        .waitForFunction(
          () => {
            const el = /** @type {any} */ (document.querySelector("#collapse-inset"));
            return el !== null && !el.hidden && el._fullLayout !== undefined && Math.abs(el._fullLayout.height - el.offsetHeight) <= 1;
          },
          null,
          { timeout: 3000 },
        )
        .catch(() => undefined);
      const inset = await page.evaluate(() => {
        const el = /** @type {any} */ (document.querySelector("#collapse-inset"));
        if (el === null || el.hidden || el._fullLayout === undefined) return null;
        const box = el.getBoundingClientRect();
        const title = el.querySelector(".gtitle")?.getBoundingClientRect() ?? null;
        const tick = el.querySelector(".xtick text");
        return {
          box: { w: box.width, h: box.height, right: box.right },
          drawn: { w: el._fullLayout.width, h: el._fullLayout.height },
          area: { w: el._fullLayout._size.w, h: el._fullLayout._size.h },
          titleRight: title === null ? null : title.right,
          tickPx: tick === null ? 0 : parseFloat(getComputedStyle(tick).fontSize),
        };
      });
      assert(inset !== null, "the S(z) inset is not shown after a best fit");
      const s = /** @type {NonNullable<typeof inset>} */ (inset);
      assert(Math.abs(s.drawn.w - s.box.w) <= 1 && Math.abs(s.drawn.h - s.box.h) <= 1, `the S(z) inset is drawn ${Math.round(s.drawn.w)} × ${Math.round(s.drawn.h)} px in a ${Math.round(s.box.w)} × ${Math.round(s.box.h)} px box`);
      // Room for a curve one can read from the back of a room: a plot area of
      // at least 240 × 120 px and tick labels of 13 px or more (common
      // practice, no source).
      assert(s.area.w >= 240 && s.area.h >= 120, `the S(z) inset's plot area is ${Math.round(s.area.w)} × ${Math.round(s.area.h)} px`);
      assert(s.tickPx >= 13, `the S(z) inset's tick labels are ${s.tickPx} px`);
      assert(s.titleRight !== null && s.titleRight <= s.box.right + 1, "the S(z) inset's title is cut at its right edge");
      measurements.push(`S(z) inset at ${label}: box ${Math.round(s.box.w)} × ${Math.round(s.box.h)} px, plot area ${Math.round(s.area.w)} × ${Math.round(s.area.h)} px, ticks ${s.tickPx} px`);
      shots.push(await sideShot(page, args.screenshot, `present-${tag}`));
      await page.keyboard.press("ArrowRight");
      await page.waitForFunction(() => document.querySelector("#tab-residual")?.getAttribute("aria-selected") === "true", null, { timeout: 3000 });
      await page.keyboard.press("Escape");
      await page.waitForFunction(() => !document.body.classList.contains("presenting"));
    };

    for (const size of [
      { width: 1280, height: 720 },
      { width: 1920, height: 1080 },
    ]) {
      for (const large of [false, true]) {
        const label = `${size.width}×${size.height}${large ? ", large text" : ""}`;
        await page.setViewportSize(size);
        const isLarge = await page.evaluate(() => document.documentElement.classList.contains("large-text"));
        if (isLarge !== large) await page.click("#large-text");
        if (size.height <= 720) {
          await check(`one view at ${label}: the figure starts on the first screen`, async () => {
            if ((await page.getAttribute("#layout-toggle", "aria-pressed")) === "true") await page.click("#layout-toggle");
            await page.click("#tab-map");
            await page.evaluate(() => window.scrollTo(0, 0));
            // The figures are redrawn for the new lettering a moment after the switch.
            await page
              .waitForFunction(() => document.documentElement.scrollWidth <= window.innerWidth, null, { timeout: 5000 })
              .catch(() => undefined);
            await page.waitForTimeout(200);
            const shown = await page.evaluate(() => {
              const plot = document.querySelector("#view-map")?.getBoundingClientRect();
              return { top: plot ? plot.top : null, height: plot ? plot.height : 0, innerHeight: window.innerHeight, scrollWidth: document.documentElement.scrollWidth, innerWidth: window.innerWidth };
            });
            assert(shown.top !== null && shown.height > 0, "no map figure");
            const top = /** @type {number} */ (shown.top);
            // A third of the screen at least is figure (common practice, no source).
            assert(top >= 0 && top <= 0.66 * shown.innerHeight, `the figure starts ${Math.round(top)} px down a ${shown.innerHeight} px screen`);
            assert(shown.scrollWidth <= shown.innerWidth, `content ${shown.scrollWidth} px wide in a ${shown.innerWidth} px window`);
            measurements.push(`map figure top at ${label}: ${Math.round(top)} px of ${shown.innerHeight}`);
            shots.push(await sideShot(page, args.screenshot, `first-screen-${size.width}${large ? "-large" : ""}`));
          });
        }
        await check(`several views at ${label}: the chosen panels do not overlap and nothing scrolls sideways`, async () => {
          await page.click("#tab-map");
          if ((await page.getAttribute("#layout-toggle", "aria-pressed")) !== "true") await page.click("#layout-toggle");
          await page.waitForTimeout(400);
          const layout = await page.evaluate(() => ({
            boxes: [...document.querySelectorAll(".view-panel")]
              .filter((el) => getComputedStyle(el).display !== "none" && getComputedStyle(el).visibility !== "hidden")
              .map((el) => {
                const r = el.getBoundingClientRect();
                return { id: el.id, x: r.x, y: r.y, w: r.width, h: r.height };
              }),
            scrollWidth: document.documentElement.scrollWidth,
            innerWidth: window.innerWidth,
          }));
          const ids = layout.boxes.map((b) => b.id).sort();
          assert(ids.join(",") === "panel-auto,panel-map,panel-slices,panel-sum", `panels shown: ${ids.join(", ")}`);
          for (const [i, a] of layout.boxes.entries()) {
            assert(a.w > 200 && a.h > 150, `${a.id} is only ${Math.round(a.w)} × ${Math.round(a.h)} px`);
            for (const b of layout.boxes.slice(i + 1)) {
              const overlap = Math.min(a.x + a.w, b.x + b.w) - Math.max(a.x, b.x) > 1 && Math.min(a.y + a.h, b.y + b.h) - Math.max(a.y, b.y) > 1;
              assert(!overlap, `${a.id} and ${b.id} overlap`);
            }
          }
          assert(layout.scrollWidth <= layout.innerWidth, `content ${layout.scrollWidth} px wide in a ${layout.innerWidth} px window`);
          shots.push(await sideShot(page, args.screenshot, `grid-${size.width}${large ? "-large" : ""}`));
          await page.click("#layout-toggle");
        });
        await check(`presentation mode at ${label}: one figure fills the screen under a banner with z ± error`, async () => {
          await page.click("#tab-collapse");
          await page.keyboard.press("p");
          await page.waitForFunction(() => document.body.classList.contains("presenting"));
          try {
            await presentationShown(label, `${size.width}${large ? "-large" : ""}`);
          } finally {
            // A failed look must not leave the next checks on a presenting page.
            if (await page.evaluate(() => document.body.classList.contains("presenting"))) await page.keyboard.press("Escape");
          }
        });
      }
    }
    await page.setViewportSize(VIEWPORT);
}
