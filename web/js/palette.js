// Colour ramps of the dashboard, computed from straight lines and arcs in the
// OKLab colour space (B. Ottosson, "A perceptual color space for image
// processing", 2020; matrices below are the published ones).
//
// Why computed instead of a list of hex codes: the construction is the
// documentation. Equal steps along a straight line in OKLab are close to equal
// perceived steps, and a ramp whose lightness rises monotonically keeps its
// order for readers with any form of colour-vision deficiency and in greyscale
// print. The heatmap ramp runs from a dark blue to a light straw yellow through
// a neutral grey, staying on the blue–yellow axis that red–green deficient
// readers still distinguish. This module knows nothing about Plotly or the API.

/** @typedef {[number, number, number]} Triple */

/**
 * Converts an OKLab colour to gamma-encoded sRGB channels in [0, 1], possibly
 * out of range when the colour is outside the sRGB gamut.
 * @param {number} L lightness, 0 (black) … 1 (white)
 * @param {number} a green–red axis
 * @param {number} b blue–yellow axis
 * @returns {Triple}
 */
export function oklabToSrgb(L, a, b) {
  const l = (L + 0.3963377774 * a + 0.2158037573 * b) ** 3;
  const m = (L - 0.1055613458 * a - 0.0638541728 * b) ** 3;
  const s = (L - 0.0894841775 * a - 1.291485548 * b) ** 3;
  const linear = [
    4.0767416621 * l - 3.3077115913 * m + 0.2309699292 * s,
    -1.2684380046 * l + 2.6097574011 * m - 0.3413193965 * s,
    -0.0041960863 * l - 0.7034186147 * m + 1.707614701 * s,
  ];
  const [r, g, bl] = linear.map((c) =>
    c <= 0.0031308 ? 12.92 * c : 1.055 * Math.pow(c, 1 / 2.4) - 0.055,
  );
  return [r, g, bl];
}

/**
 * @param {Triple} rgb
 * @returns {boolean}
 */
function inGamut(rgb) {
  return rgb.every((c) => c >= -1e-6 && c <= 1 + 1e-6);
}

/**
 * @param {Triple} rgb gamma-encoded channels in [0, 1]
 * @returns {string} `#rrggbb`
 */
function toHex(rgb) {
  return (
    "#" +
    rgb
      .map((c) =>
        Math.round(Math.min(1, Math.max(0, c)) * 255)
          .toString(16)
          .padStart(2, "0"),
      )
      .join("")
  );
}

/**
 * An OKLCh colour as hex, with chroma reduced (hue and lightness kept) until
 * it fits into sRGB, so that lightness stays monotonic along a ramp.
 * @param {number} L lightness
 * @param {number} C chroma
 * @param {number} hDeg hue angle in degrees
 * @returns {string}
 */
export function oklchHex(L, C, hDeg) {
  const h = (hDeg * Math.PI) / 180;
  let lo = 0;
  let hi = C;
  if (inGamut(oklabToSrgb(L, C * Math.cos(h), C * Math.sin(h)))) {
    lo = C;
  } else {
    for (let i = 0; i < 30; i += 1) {
      const mid = (lo + hi) / 2;
      if (inGamut(oklabToSrgb(L, mid * Math.cos(h), mid * Math.sin(h)))) lo = mid;
      else hi = mid;
    }
  }
  return toHex(oklabToSrgb(L, lo * Math.cos(h), lo * Math.sin(h)));
}

/** Start and end of the heatmap ramp in OKLCh: [L, C, hue°]. */
const MAP_START = /** @type {Triple} */ ([0.25, 0.11, 262]);
const MAP_END = /** @type {Triple} */ ([0.94, 0.15, 98]);

/**
 * The sequential heatmap ramp ("dusk to straw") as a Plotly-style colour
 * scale: a straight line in OKLab between MAP_START and MAP_END, so
 * lightness rises linearly and chroma passes through a neutral grey midway.
 * @param {number} [stops] number of stops, at least 2
 * @returns {Array<[number, string]>} pairs (position in [0, 1], `#rrggbb`)
 */
export function mapColourScale(stops = 17) {
  const toLab = (/** @type {Triple} */ [L, C, h]) => {
    const r = (h * Math.PI) / 180;
    return [L, C * Math.cos(r), C * Math.sin(r)];
  };
  const a = toLab(MAP_START);
  const b = toLab(MAP_END);
  /** @type {Array<[number, string]>} */
  const scale = [];
  for (let i = 0; i < stops; i += 1) {
    const s = i / (stops - 1);
    const [L, A, B] = a.map((v, k) => v + s * (b[k] - v));
    const chroma = Math.hypot(A, B);
    const hue = (Math.atan2(B, A) * 180) / Math.PI;
    scale.push([s, oklchHex(L, chroma, hue)]);
  }
  return scale;
}

/**
 * Line colours for `n` ordered series (time slices, early to late): an arc in
 * OKLCh from indigo through magenta to amber with lightness rising from 0.32
 * to 0.64, dark enough on the light plot background to keep contrast.
 * @param {number} n number of series
 * @returns {string[]}
 */
export function orderedSeriesColours(n) {
  if (n <= 0) return [];
  /** @type {string[]} */
  const colours = [];
  for (let i = 0; i < n; i += 1) {
    const s = n === 1 ? 0 : i / (n - 1);
    const L = 0.32 + 0.32 * s;
    const hue = 275 + 150 * s;
    colours.push(oklchHex(L, 0.16, hue % 360));
  }
  return colours;
}

/**
 * The time ramp of the collapse view as a Plotly colour scale: the same
 * indigo–magenta–amber arc as `orderedSeriesColours`, sampled so that a
 * colour bar matches the lines drawn with `timeColour`.
 * @param {number} [stops]
 * @returns {Array<[number, string]>}
 */
export function timeColourScale(stops = 11) {
  /** @type {Array<[number, string]>} */
  const scale = [];
  for (let i = 0; i < stops; i += 1) {
    const s = i / (stops - 1);
    scale.push([s, timeColour(s)]);
  }
  return scale;
}

/**
 * A colour on the time ramp.
 * @param {number} s position 0 (earliest) … 1 (latest)
 * @returns {string}
 */
export function timeColour(s) {
  const c = Math.min(1, Math.max(0, s));
  return oklchHex(0.32 + 0.32 * c, 0.16, (275 + 150 * c) % 360);
}

/** Ends of the diverging ramp in OKLCh: cool below the model, warm above. */
const COOL = /** @type {Triple} */ ([0.42, 0.12, 235]);
const WARM = /** @type {Triple} */ ([0.45, 0.15, 40]);
const MIDDLE_L = 0.975;

/**
 * The diverging ramp of difference maps ("slate to brick"): from a dark
 * slate blue through near-white to a brick red, lightness symmetric about the
 * middle so that equal |data − model| reads equally strong on either side,
 * and the two hues on the blue–orange axis that red–green deficient readers
 * still tell apart.
 * @param {number} [stops] odd number of stops, at least 3
 * @returns {Array<[number, string]>}
 */
export function divergingColourScale(stops = 17) {
  /** @type {Array<[number, string]>} */
  const scale = [];
  const half = (stops - 1) / 2;
  for (let i = 0; i < stops; i += 1) {
    const s = i / (stops - 1);
    const k = Math.abs(i - half) / half; // 0 in the middle, 1 at the ends
    const end = i < half ? COOL : WARM;
    const L = MIDDLE_L + (end[0] - MIDDLE_L) * k;
    const C = end[1] * Math.pow(k, 0.8);
    scale.push([s, oklchHex(L, C, end[2])]);
  }
  return scale;
}

/**
 * Marker colours of the estimators in the cross-run plots, picked far apart
 * in hue at one lightness so that none dominates.
 * @param {number} n
 * @returns {string[]}
 */
export function categoryColours(n) {
  /** @type {string[]} */
  const out = [];
  for (let i = 0; i < n; i += 1) out.push(oklchHex(0.5, 0.14, (250 + (i * 137.5)) % 360));
  return out;
}
