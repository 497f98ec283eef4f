// The top bar and footer: session name, whether this link may edit, the share
// links with copy buttons, the live-update indicator, and the conventions
// text. Knows the Session shape from api.js; knows nothing about datasets or
// plotting.

import { byId } from "./dom.js";
import { formulaNodes } from "./words.js";

/** @typedef {import("./api.js").Session} Session */

/**
 * Fills the header and footer from the session description.
 * @param {Session} session
 */
export function renderSession(session) {
  const name = session.name || "Untitled session";
  const heading = byId("session-name", HTMLElement);
  heading.textContent = name;
  heading.title = name;
  document.title = `${name} · spreadscope`;

  const badge = byId("access-badge", HTMLElement);
  badge.hidden = false;
  badge.textContent = session.can_edit ? "can edit" : "view only";
  badge.dataset.access = session.can_edit ? "edit" : "view";
  badge.title = session.can_edit
    ? "This link may add datasets and change metadata."
    : "This link may look but not change anything.";

  const viewInput = byId("view-url-text", HTMLInputElement);
  viewInput.value = absolute(session.view_url);
  byId("share-view", HTMLElement).hidden = !session.view_url;
  byId("copy-view", HTMLButtonElement).hidden = !session.view_url;

  const editInput = byId("edit-url-text", HTMLInputElement);
  const editUrl = session.edit_url ?? null;
  editInput.value = editUrl ? absolute(editUrl) : "";
  byId("share-edit", HTMLElement).hidden = !editUrl;
  byId("copy-edit", HTMLButtonElement).hidden = !editUrl;

  byId("conventions", HTMLElement).replaceChildren(...formulaNodes(session.conventions));
  const version = session.program_version.startsWith("spreadscope")
    ? session.program_version
    : `spreadscope ${session.program_version}`;
  byId("program-version", HTMLElement).textContent = `${version}.`;
  byId("session-created", HTMLElement).textContent = session.created_at
    ? `Session created ${session.created_at}.`
    : "";
}

/**
 * Share links may come back relative to the server; people paste them into
 * chat, so show them absolute.
 * @param {string} url
 * @returns {string}
 */
function absolute(url) {
  try {
    return new URL(url, window.location.origin).href;
  } catch {
    return url;
  }
}

/** Wires the copy buttons (elements with `data-copy-target`). */
export function wireCopyButtons() {
  const status = byId("copy-status", HTMLElement);
  for (const button of document.querySelectorAll("button[data-copy-target]")) {
    if (!(button instanceof HTMLButtonElement)) continue;
    button.addEventListener("click", async () => {
      const input = byId(button.dataset.copyTarget ?? "", HTMLInputElement);
      const what = button.id === "copy-edit" ? "Edit link" : "View link";
      const ok = await copyText(input);
      status.textContent = ok
        ? `${what} copied.`
        : `Copy failed: the ${what.toLowerCase()} is at the foot of the page, selected for copying by hand.`;
      if (!ok) {
        input.scrollIntoView({ block: "center" });
        input.focus();
        input.select();
      }
      window.setTimeout(() => {
        status.textContent = "";
      }, 4000);
    });
  }
}

/**
 * Copies an input's text. The asynchronous clipboard exists only in secure
 * contexts (https or loopback); a colleague opening the link over plain http
 * on the lab network gets the older selection-based copy instead.
 * @param {HTMLInputElement} input
 * @returns {Promise<boolean>}
 */
async function copyText(input) {
  if (navigator.clipboard && window.isSecureContext) {
    try {
      await navigator.clipboard.writeText(input.value);
      return true;
    } catch {
      // Fall through to the selection-based copy below.
    }
  }
  const back = document.activeElement;
  input.focus({ preventScroll: true });
  input.select();
  try {
    return document.execCommand("copy");
  } catch {
    return false;
  } finally {
    if (back instanceof HTMLElement) back.focus({ preventScroll: true });
  }
}

/** Words and tooltips of the live-update indicator. */
const LIVE_TEXT = {
  connecting: ["connecting…", "Opening the update stream."],
  live: ["live", "New datasets and metadata changes from others appear here by themselves."],
  reconnecting: ["reconnecting…", "Lost the update stream; the browser is trying again."],
  offline: ["not connected", "No session is open, so there are no updates to follow."],
};

/**
 * Shows whether live updates are flowing.
 * @param {keyof typeof LIVE_TEXT} state
 */
export function setLiveState(state) {
  const el = byId("live-status", HTMLElement);
  const [text, title] = LIVE_TEXT[state];
  el.dataset.state = state;
  el.textContent = text;
  el.title = title;
}
