// What this browser remembers about its person, in localStorage: the name
// put on pinned entries (asked once) and the large-text setting. Storage may
// be unavailable (private windows, strict settings); then nothing is
// remembered and nothing fails. Knows nothing about the API or plotting.

const AUTHOR_KEY = "spreadscope.author";
const TEXT_KEY = "spreadscope.largeText";

/**
 * @param {string} key
 * @returns {string | null}
 */
function read(key) {
  try {
    return window.localStorage.getItem(key);
  } catch {
    return null;
  }
}

/**
 * @param {string} key
 * @param {string | null} value null removes the key
 */
function write(key, value) {
  try {
    if (value === null) window.localStorage.removeItem(key);
    else window.localStorage.setItem(key, value);
  } catch {
    // Storage refused: the value lives only as long as the page.
  }
}

/** @type {string | null} Kept here as well, in case storage is refused. */
let authorInMemory = null;

/** @returns {string | null} the remembered author name, if any */
export function author() {
  const stored = read(AUTHOR_KEY);
  return stored !== null && stored.trim() !== "" ? stored : authorInMemory;
}

/** @param {string | null} name */
export function setAuthor(name) {
  const clean = name === null ? null : name.trim() || null;
  authorInMemory = clean;
  write(AUTHOR_KEY, clean);
}

/** @returns {boolean} */
export function largeText() {
  return read(TEXT_KEY) === "1";
}

/** @param {boolean} on */
export function setLargeText(on) {
  write(TEXT_KEY, on ? "1" : null);
}
