// The small forms that write to the session log: pinning a fit, adding a
// note, retracting an entry. Each asks for the author's name once (then this
// browser remembers it) and for a comment, and reports the server's answer
// in words. Also the "pinning as …" line of the log panel. Knows nothing
// about plotting.

import { ApiError } from "./api.js";
import { h } from "./dom.js";
import { author, setAuthor } from "./prefs.js";

/**
 * Listeners told when the author name changes, keyed by the element they
 * refresh; forms that left the page are dropped on the next change.
 * @type {Map<HTMLElement, () => void>}
 */
const authorListeners = new Map();

function authorChanged() {
  for (const [el, listener] of authorListeners) {
    if (el.isConnected) listener();
    else authorListeners.delete(el);
  }
}

let formCount = 0;

/**
 * A form with an author field (only while no name is remembered), a comment
 * field and a submit button.
 * @param {object} options
 * @param {string} options.submitLabel
 * @param {string} options.commentLabel
 * @param {string} [options.placeholder]
 * @param {boolean} [options.commentRequired]
 * @param {string} [options.testid]
 * @param {(author: string, comment: string) => Promise<string>} options.onSubmit resolves to a success message
 * @param {() => void} [options.onCancel] shows a Cancel button when given
 * @returns {HTMLFormElement}
 */
export function pinForm(options) {
  formCount += 1;
  const n = formCount;
  const authorInput = h("input", { type: "text", id: `pin-author-${n}`, maxlength: "100", autocomplete: "name", placeholder: "e.g. Kim" });
  const authorField = h("div", { class: "field" }, [
    h("label", { for: `pin-author-${n}` }, ["Your name (asked once, kept in this browser)"]),
    authorInput,
  ]);
  const comment = h("textarea", { id: `pin-comment-${n}`, rows: "2", maxlength: "10000", placeholder: options.placeholder ?? "" });
  const status = h("span", { class: "form-status", role: "status", "aria-live": "polite" });
  const submit = h("button", { type: "submit", class: "btn btn-primary btn-small" }, [options.submitLabel]);
  const actions = h("div", { class: "form-actions" }, [submit]);
  if (options.onCancel) {
    const cancel = h("button", { type: "button", class: "btn btn-small" }, ["Cancel"]);
    cancel.addEventListener("click", () => options.onCancel?.());
    actions.append(cancel);
  }
  actions.append(status);
  const form = h("form", { class: "pin-form", novalidate: "", ...(options.testid ? { "data-testid": options.testid } : {}) }, [
    authorField,
    h("div", { class: "field" }, [h("label", { for: `pin-comment-${n}` }, [options.commentLabel]), comment]),
    actions,
  ]);
  const syncAuthor = () => {
    authorField.hidden = author() !== null;
  };
  syncAuthor();
  authorListeners.set(form, syncAuthor);
  form.addEventListener("submit", async (ev) => {
    ev.preventDefault();
    status.dataset.kind = "";
    const name = author() ?? authorInput.value.trim();
    if (name === "") {
      status.textContent = "Please give your name: it goes with the entry.";
      status.dataset.kind = "error";
      authorInput.setAttribute("aria-invalid", "true");
      authorInput.focus();
      return;
    }
    authorInput.removeAttribute("aria-invalid");
    const text = comment.value.trim();
    if (options.commentRequired && text === "") {
      status.textContent = "Please say why, in a few words.";
      status.dataset.kind = "error";
      comment.setAttribute("aria-invalid", "true");
      comment.focus();
      return;
    }
    comment.removeAttribute("aria-invalid");
    submit.disabled = true;
    status.textContent = "Sending…";
    try {
      const message = await options.onSubmit(name, text);
      if (author() === null) {
        setAuthor(name);
        authorChanged();
      }
      comment.value = "";
      status.textContent = message;
      status.dataset.kind = "ok";
    } catch (e) {
      status.textContent = e instanceof ApiError && e.status === 403
        ? "Not allowed: this is a view link. Ask for the edit link to write to the log."
        : `Not saved: ${e instanceof Error ? e.message : String(e)}`;
      status.dataset.kind = "error";
    } finally {
      submit.disabled = false;
    }
  });
  return form;
}

/**
 * Fills the "pinning as …" line with a way to change the name.
 * @param {HTMLElement} el
 */
export function wireAuthorLine(el) {
  const render = () => {
    const name = author();
    if (name === null) {
      el.textContent = "You will be asked for your name with your first entry.";
      return;
    }
    const change = h("button", { type: "button", class: "link-button" }, ["change"]);
    change.addEventListener("click", () => {
      const input = h("input", { type: "text", maxlength: "100", value: name, "aria-label": "Your name" });
      const save = h("button", { type: "button", class: "btn btn-small" }, ["Keep"]);
      const apply = () => {
        const next = input.value.trim();
        if (next !== "") setAuthor(next);
        authorChanged();
      };
      save.addEventListener("click", apply);
      input.addEventListener("keydown", (ev) => {
        if (ev.key === "Enter") apply();
        if (ev.key === "Escape") render();
      });
      el.replaceChildren("Your name: ", input, " ", save);
      input.focus();
      input.select();
    });
    el.replaceChildren("Entries from this browser are signed ", h("strong", {}, [name]), " (", change, ").");
  };
  authorListeners.set(el, render);
  render();
}
