// Number formatting for labels, legends and the facts line. Display only:
// knows nothing about the API, the page or plotting.

/**
 * Formats a number compactly, with at most 4 significant digits; very small
 * or large magnitudes in scientific notation.
 * @param {number} v
 * @returns {string}
 */
export function formatNumber(v) {
  if (!Number.isFinite(v)) return String(v);
  if (v === 0) return "0";
  const a = Math.abs(v);
  if (a >= 1e-3 && a < 1e5) return String(Number(v.toPrecision(4)));
  return v.toExponential(2).replace("e", "×10^");
}
