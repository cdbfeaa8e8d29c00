// Number formatting for the results page: one set of rules for every figure the page shows, shared with the
// browser test (which reads each element's data-format and data-field, formats the JSON value with
// `formatByKind`, and expects the element's text). Plain ES module, no dependencies; types in format.d.ts.
//
// Rules
//   missing (null, undefined, NaN, ±Infinity) → "—"
//   number   3 significant digits, trailing zeros kept (6.80), whole numbers as integers (7, 1,250);
//            |x| ≥ 1e6 or |x| < 1e-4 in exponent form (1.23e6, 4.5e−5); a true minus sign (U+2212)
//   count    whole number with thousands separators (5,310)
//   p        "< 0.001" below 0.001, otherwise 3 significant digits (0.0421, 0.350, 1.00)
//   interval "[lower, upper]"; an open side (one-sided interval) is −∞ or ∞
//   level    a proportion as a percentage: 0.95 → "95%", 0.9532 → "95.3%"
//   percent  the same for fractions of a planned size, whole percent: 0.42 → "42%"
//   z        a z statistic with 2 decimals (2.03, −1.96)

export const MINUS = '\u2212';
export const MISSING = '\u2014';

function isNum(x) {
  return typeof x === 'number' && Number.isFinite(x);
}

function groupThousands(int) {
  return int.replace(/\B(?=(\d{3})+(?!\d))/g, ',');
}

/** A number with `digits` significant digits (default 3); see the rules above. */
export function formatNumber(x, digits = 3) {
  if (!isNum(x)) return MISSING;
  if (x === 0) return '0';
  const sign = x < 0 ? MINUS : '';
  const ax = Math.abs(x);
  if (ax >= 1e6 || ax < 1e-4) {
    const [mantissa, exponent] = ax.toExponential(digits - 1).split('e');
    const m = mantissa.includes('.') ? mantissa.replace(/0+$/, '').replace(/\.$/, '') : mantissa;
    const e = Number(exponent);
    return `${sign}${m}e${e < 0 ? MINUS : ''}${Math.abs(e)}`;
  }
  if (Number.isInteger(ax)) return sign + groupThousands(String(ax));
  const decimals = Math.min(6, Math.max(0, digits - 1 - Math.floor(Math.log10(ax))));
  const [int, frac] = ax.toFixed(decimals).split('.');
  return sign + groupThousands(int) + (frac !== undefined ? `.${frac}` : '');
}

/** A whole count with thousands separators. */
export function formatCount(n) {
  if (!isNum(n)) return MISSING;
  const r = Math.round(n);
  return (r < 0 ? MINUS : '') + groupThousands(String(Math.abs(r)));
}

/** A p-value: "< 0.001" below 0.001, else 3 significant digits. */
export function formatP(p) {
  if (!isNum(p)) return MISSING;
  if (p < 0.001) return '< 0.001';
  if (p >= 0.9995) return '1.00';
  return formatNumber(p, 3);
}

/** A p-value at full precision, for a tooltip ("p = 3.2e−12"). */
export function formatPExact(p) {
  if (!isNum(p)) return MISSING;
  if (p === 0) return '0';
  return p < 1e-4 ? formatNumber(p, 2) : formatNumber(p, 4);
}

/** An interval object { lower, upper } (or null) as "[lower, upper]". */
export function formatInterval(ci) {
  if (ci === null || ci === undefined || typeof ci !== 'object') return MISSING;
  const lo = isNum(ci.lower) ? ci.lower : null;
  const hi = isNum(ci.upper) ? ci.upper : null;
  if (lo === null && hi === null) return MISSING;
  return `[${lo === null ? `${MINUS}\u221e` : formatNumber(lo)}, ${hi === null ? '\u221e' : formatNumber(hi)}]`;
}

/** A confidence level (a proportion) as a percentage with at most one decimal: 0.95 → "95%". */
export function formatLevel(level) {
  if (!isNum(level)) return MISSING;
  const pct = level * 100;
  const rounded = Math.round(pct);
  if (Math.abs(pct - rounded) < 1e-9) return `${rounded}%`;
  return `${pct.toFixed(1)}%`;
}

/** A fraction (answers so far / planned) as a whole percentage: 0.425 → "43%". */
export function formatPercent(fraction) {
  if (!isNum(fraction)) return MISSING;
  return `${Math.round(fraction * 100)}%`;
}

/** A z statistic with two decimals. */
export function formatZ(z) {
  if (!isNum(z)) return MISSING;
  const s = Math.abs(z).toFixed(2);
  return (z < 0 && s !== '0.00' ? MINUS : '') + s;
}

/** Formatter by name, as written in an element's data-format attribute. */
export const FORMATTERS = Object.freeze({
  number: (v) => formatNumber(v),
  count: formatCount,
  p: formatP,
  interval: formatInterval,
  level: formatLevel,
  percent: formatPercent,
  z: formatZ,
  text: (v) => (v === null || v === undefined ? MISSING : String(v)),
});

/** Format `value` with the formatter named `kind` (see FORMATTERS); unknown kinds throw. */
export function formatByKind(kind, value) {
  const f = FORMATTERS[kind];
  if (!f) throw new RangeError(`unknown format kind "${kind}"`);
  return f(value);
}

/**
 * Read a dotted path ("welch.ci", "groups.a.mean", "monitoring.groupSequential.looks.0.boundaryZ") from a
 * JSON object; undefined when any step is missing.
 */
export function readPath(obj, path) {
  let cur = obj;
  for (const part of String(path).split('.')) {
    if (cur === null || cur === undefined || typeof cur !== 'object') return undefined;
    cur = cur[part];
  }
  return cur;
}
