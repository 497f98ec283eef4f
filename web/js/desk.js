// The desk: the tabbed column beside the plots with the data (datasets,
// upload, metadata), the fit panel, the theory overlay and the session log.
// Owns its tab strip (arrow keys move between tabs) and the unread count on
// the log's tab. Knows nothing about the API or plotting.

import { byId } from "./dom.js";

export const DESK_NAMES = /** @type {const} */ (["data", "fits", "theory", "log"]);
/** @typedef {typeof DESK_NAMES[number]} DeskName */

/** @type {DeskName} */
let active = "data";
let unread = 0;

/** @returns {DeskName} */
export function activeDesk() {
  return active;
}

/**
 * Shows one part of the desk.
 * @param {DeskName} name
 * @param {{focus?: boolean}} [options]
 */
export function showDesk(name, options = {}) {
  active = name;
  for (const other of DESK_NAMES) {
    const tab = byId(`desk-tab-${other}`, HTMLButtonElement);
    const isOn = other === name;
    tab.setAttribute("aria-selected", isOn ? "true" : "false");
    tab.tabIndex = isOn ? 0 : -1;
    byId(`desk-${other}`, HTMLElement).hidden = !isOn;
    if (isOn && options.focus) tab.focus();
  }
  if (name === "log") markRead();
}

/** Counts entries that arrived while the log was not shown. */
export function noteUnread(count = 1) {
  if (active === "log") return;
  unread += count;
  const badge = byId("log-unread", HTMLElement);
  badge.textContent = String(unread);
  badge.title = `${unread} new entr${unread === 1 ? "y" : "ies"}`;
  badge.hidden = false;
}

function markRead() {
  unread = 0;
  byId("log-unread", HTMLElement).hidden = true;
}

/** Wires the tab strip. */
export function wireDesk() {
  const tabs = DESK_NAMES.map((name) => byId(`desk-tab-${name}`, HTMLButtonElement));
  tabs.forEach((tab, i) => {
    tab.addEventListener("click", () => showDesk(DESK_NAMES[i] ?? "data"));
    tab.addEventListener("keydown", (ev) => {
      /** @type {number | null} */
      let next = null;
      if (ev.key === "ArrowRight") next = (i + 1) % tabs.length;
      else if (ev.key === "ArrowLeft") next = (i - 1 + tabs.length) % tabs.length;
      else if (ev.key === "Home") next = 0;
      else if (ev.key === "End") next = tabs.length - 1;
      if (next !== null) {
        ev.preventDefault();
        showDesk(DESK_NAMES[next] ?? "data", { focus: true });
      }
    });
  });
}
