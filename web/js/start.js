// The start page: creates, names, renames and lists sessions.
//
// Which sessions are listed: the server shows a session only to someone who
// holds one of its links, and keeps no list for browsers. This page keeps
// the links of the sessions created or added here in this browser's
// localStorage (key `spreadscope-sessions`, tokens only) and asks the server
// for each one's current name, so a rename made elsewhere shows up. Creating
// needs no token; renaming needs the edit link.

const STORE_KEY = "spreadscope-sessions";

/** @typedef {{token: string}} Saved */
/** @typedef {{name: string, can_edit: boolean, view_url: string, edit_url: string | null, created_at: string}} Info */

/**
 * @template {HTMLElement} T
 * @param {string} id
 * @param {new () => T} type
 * @returns {T}
 */
function byId(id, type) {
  const el = document.getElementById(id);
  if (!(el instanceof type)) throw new Error(`the page lacks #${id}`);
  return el;
}

/** @returns {Saved[]} */
function loadSaved() {
  try {
    const raw = JSON.parse(localStorage.getItem(STORE_KEY) ?? "[]");
    if (!Array.isArray(raw)) return [];
    return raw.filter((s) => s && typeof s.token === "string" && /^[0-9a-f]{32}$/.test(s.token));
  } catch {
    return [];
  }
}

/** @param {Saved[]} list */
function save(list) {
  localStorage.setItem(STORE_KEY, JSON.stringify(list));
}

/** @param {string} token */
function remember(token) {
  const list = loadSaved();
  if (!list.some((s) => s.token === token)) {
    list.unshift({ token });
    save(list);
  }
}

/** @param {string} token */
function forget(token) {
  save(loadSaved().filter((s) => s.token !== token));
}

/** @param {string} text @param {boolean} [error] */
function say(text, error = false) {
  const el = byId("start-status", HTMLElement);
  el.textContent = text;
  el.classList.toggle("error", error);
}

/**
 * The message of a failed request, in the server's words when it gave some.
 * @param {Response} response
 */
async function failure(response) {
  try {
    const body = await response.json();
    if (body && typeof body.error === "string") return body.error;
  } catch {
    // Not JSON: fall through to the status line.
  }
  return `the server answered ${response.status}`;
}

/** @param {string} token @returns {Promise<Info | null>} */
async function info(token) {
  const response = await fetch(`/api/s/${token}`);
  if (response.status === 404) return null;
  if (!response.ok) throw new Error(await failure(response));
  return /** @type {Info} */ (await response.json());
}

/** @param {string} iso */
function day(iso) {
  const d = new Date(iso);
  return Number.isNaN(d.getTime()) ? iso : d.toLocaleString(undefined, { dateStyle: "medium", timeStyle: "short" });
}

/**
 * @param {string} tag
 * @param {Record<string, string>} [attrs]
 * @param {(Node | string)[]} [children]
 */
function h(tag, attrs = {}, children = []) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, v);
  el.append(...children);
  return el;
}

/** @param {string} token @param {Info} s */
function row(token, s) {
  const name = h("span", { class: "name", "data-testid": "session-name" }, [s.name]);
  const open = h("a", { href: `/s/${token}` }, [s.can_edit ? "Open (edit)" : "Open (view only)"]);
  const actions = h("div", { class: "actions" }, [open]);
  if (s.view_url && s.can_edit) {
    actions.append(h("a", { href: s.view_url }, ["View link"]));
  }
  const item = h("li", { "data-token": token }, [
    name,
    h("div", { class: "meta" }, [`created ${day(s.created_at)}${s.can_edit ? "" : " · view only"}`]),
    actions,
  ]);
  if (s.can_edit) {
    const rename = /** @type {HTMLButtonElement} */ (h("button", { type: "button", class: "btn btn-quiet", "data-testid": "rename" }, ["Rename"]));
    rename.addEventListener("click", () => startRename(item, token, s.name));
    actions.append(rename);
  }
  const drop = /** @type {HTMLButtonElement} */ (h("button", { type: "button", class: "btn btn-quiet" }, ["Forget here"]));
  drop.title = "Remove from this browser's list; the session stays on the server";
  drop.addEventListener("click", () => {
    forget(token);
    void render();
  });
  actions.append(drop);
  return item;
}

/** @param {HTMLElement} item @param {string} token @param {string} current */
function startRename(item, token, current) {
  const input = /** @type {HTMLInputElement} */ (h("input", { maxlength: "200", "aria-label": "New name", "data-testid": "rename-input" }));
  input.value = current;
  const ok = h("button", { type: "submit", class: "btn" }, ["Save name"]);
  const form = h("form", { class: "row" }, [input, ok]);
  form.addEventListener("submit", async (event) => {
    event.preventDefault();
    const response = await fetch(`/api/s/${token}/name`, {
      method: "PUT",
      headers: { "Content-Type": "application/json" },
      body: JSON.stringify({ name: input.value }),
    });
    if (!response.ok) {
      say(`Could not rename: ${await failure(response)}`, true);
      return;
    }
    const body = await response.json();
    say(`Renamed to “${body.name}”.`);
    await render();
  });
  item.append(form);
  input.focus();
}

async function render() {
  const list = byId("sessions", HTMLUListElement);
  const saved = loadSaved();
  const items = await Promise.all(
    saved.map(async ({ token }) => {
      try {
        const s = await info(token);
        return s ? row(token, s) : h("li", { "data-token": token }, ["A saved link that this server does not know (the session is gone or the link is wrong)."]);
      } catch (e) {
        return h("li", {}, [`Could not read a session: ${e instanceof Error ? e.message : String(e)}`]);
      }
    }),
  );
  list.replaceChildren(...items);
  byId("no-sessions", HTMLElement).hidden = saved.length > 0;
}

/** The token of a pasted session link (or a bare token), or null. @param {string} text */
function tokenOf(text) {
  const m = /(?:\/s\/)?([0-9a-f]{32})\/?(?:[?#].*)?$/.exec(text.trim());
  return m ? m[1] ?? null : null;
}

function main() {
  byId("new-session", HTMLFormElement).addEventListener("submit", async (event) => {
    event.preventDefault();
    const name = byId("new-name", HTMLInputElement);
    const response = await fetch("/api/sessions", {
      method: "POST",
      headers: { "Content-Type": "application/json" },
      body: JSON.stringify({ name: name.value }),
    });
    if (!response.ok) {
      say(`Could not create the session: ${await failure(response)}`, true);
      return;
    }
    const body = await response.json();
    remember(body.edit_token);
    name.value = "";
    say("Session created. Its edit link is kept in this browser; share the view link to let others read.");
    await render();
  });
  byId("add-link", HTMLFormElement).addEventListener("submit", async (event) => {
    event.preventDefault();
    const input = byId("link", HTMLInputElement);
    const token = tokenOf(input.value);
    if (!token) {
      say("That is not a session link: it should end in /s/ followed by 32 letters and digits.", true);
      return;
    }
    if (!(await info(token))) {
      say("This server holds no session with that link.", true);
      return;
    }
    remember(token);
    input.value = "";
    say("Session added to this browser's list.");
    await render();
  });
  byId("import-archive", HTMLFormElement).addEventListener("submit", async (event) => {
    event.preventDefault();
    const input = byId("archive-file", HTMLInputElement);
    const file = input.files?.[0];
    if (!file) {
      say("Choose an archive file first (a .zip downloaded from a session's log).", true);
      return;
    }
    say(`Importing ${file.name}…`);
    const response = await fetch("/api/archives", {
      method: "POST",
      headers: { "Content-Type": "application/zip" },
      body: file,
    });
    if (!response.ok) {
      say(`Could not import ${file.name}: ${await failure(response)}`, true);
      return;
    }
    const body = await response.json();
    remember(body.edit_token);
    input.value = "";
    say(`Imported ${file.name}: ${body.datasets} datasets and ${body.log_entries} log entries, in a new session with new links.`);
    await render();
  });
  void render();
}

main();
