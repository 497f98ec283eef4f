// Small helpers for building and finding page elements. Knows nothing about
// the API or plotting.

/**
 * Finds an element that index.html is known to contain, failing loudly when
 * the page and the scripts have drifted apart.
 * @template {HTMLElement} T
 * @param {string} id
 * @param {new (...args: any[]) => T} type expected element class
 * @returns {T}
 */
export function byId(id, type) {
  const found = document.getElementById(id);
  if (!(found instanceof type)) {
    throw new Error(`page element #${id} is missing or not a ${type.name}`);
  }
  return found;
}

/**
 * Creates an element with text-only content (never HTML, so server strings
 * cannot inject markup).
 * @template {keyof HTMLElementTagNameMap} K
 * @param {K} tag
 * @param {Record<string, string>} [attrs]
 * @param {Array<Node | string>} [children]
 * @returns {HTMLElementTagNameMap[K]}
 */
export function h(tag, attrs = {}, children = []) {
  const node = document.createElement(tag);
  for (const [name, value] of Object.entries(attrs)) {
    if (name === "class") node.className = value;
    else node.setAttribute(name, value);
  }
  node.append(...children);
  return node;
}

/**
 * Shows or hides an element through the `hidden` attribute.
 * @param {HTMLElement} el
 * @param {boolean} visible
 */
export function show(el, visible) {
  el.hidden = !visible;
}
