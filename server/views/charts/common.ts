/**
 * Server-rendered SVG figures for the results page: a box plot with every answer drawn as a point
 * (one per condition) and the interim-monitoring trajectory (estimate and anytime-valid interval, with the p strip).
 *
 * Pure: strings in, strings out. No I/O, no globals, no dependencies, no clock, no randomness (the jitter
 * is a hash of each answer's value and its rank among equal answers, so the picture is the same for the
 * same data and an answer that arrives later does not move the points already drawn).
 *
 * Why SVG strings from the server (see README.md): no client charting dependency, nothing to fetch from a
 * CDN, works under `default-src 'self'` (no inline style: only presentation attributes and class names),
 * testable as plain strings, and the browser test sees exactly what the unit tests checked.
 *
 * Reading the box plot: the box spans the first to the third quartile (the middle half of the answers),
 * the thick line is the median, the diamond is the mean, the whiskers reach the most extreme answers that
 * lie within 1.5 · IQR of the box (Tukey 1977), and the dots beside the box are the answers themselves
 * (an evenly spaced subsample of the order statistics when a group has more than `maxPoints` answers; the
 * chart says so). The value axis always runs from the item's scale minimum to its maximum, so two charts of
 * the same item are comparable at a glance.
 *
 * Cost: O(K + m) per group for K distinct values and m drawn points (m ≤ maxPoints, default 2,000).
 */
import { formatCount, formatNumber, MINUS } from '../../pages/format.js';
import type { Sample } from '../../../stats/sample.js';
import type { GroupSummary } from '../../../stats/types.js';

// ---------------------------------------------------------------------------------------------------------
// Types
// ---------------------------------------------------------------------------------------------------------

export interface ChartScale {
  /** Smallest possible answer of the item. */
  min: number;
  /** Largest possible answer of the item. */
  max: number;
  /** True for whole-number items (0–10, 1–7): points spread sideways in proportion to how common each value is. */
  integer: boolean;
}

export interface DistributionGroup {
  /** Condition label, shown under the group (escaped). */
  label: string;
  /** Number of answers the summary statistics were computed from. */
  n: number;
  q1: number | null;
  median: number | null;
  q3: number | null;
  mean: number | null;
  /** Most extreme answer ≥ q1 − 1.5·IQR (see `whiskers`). */
  whiskerLow: number | null;
  /** Most extreme answer ≤ q3 + 1.5·IQR. */
  whiskerHigh: number | null;
  /**
   * Answers in non-decreasing order. With `counts`, the distinct values in increasing order and
   * counts[i] answers equal to points[i] (the per-value counts of an integer item).
   */
  points: Float64Array | readonly number[];
  counts?: Float64Array | readonly number[];
  /**
   * How many answers the points stand for (default `n`). When the caller has already subsampled
   * (fewer points than totalN), the chart says "showing m of totalN answers".
   */
  totalN?: number;
}

export interface DistributionChartInput {
  measureLabel: string;
  scale: ChartScale;
  groups: readonly DistributionGroup[];
  /** Most points drawn per group (default 2,000): above it an evenly spaced subsample of order statistics. */
  maxPoints?: number;
  /** Prefix for the title/desc element ids (must be unique on a page); default derived from the label. */
  id?: string;
  /**
   * "scale" (default): the axis spans the item's whole scale. "data": the axis spans the answers' range (nice ticks,
   * inside the scale), marked "axis does not start at the scale's minimum" when it does not.
   */
  range?: 'scale' | 'data';
}

export interface TrajectoryPoint {
  /** Answers so far (both conditions together). */
  n: number;
  /** Anytime-valid p-value at that moment, in [0, 1]; null when not yet defined. */
  p: number | null;
  /** Anytime-valid interval (confidence sequence) for mean a − mean b at that moment; null early on (skipped). */
  lower: number | null;
  upper: number | null;
  /** Mean a − mean b at that moment (optional; drawn as a line when present). */
  estimate?: number | null;
  /** Answers per condition at that moment (optional; with `floorPerCondition` they decide `provisional`). */
  nA?: number;
  nB?: number;
  /** Before the floor of answers per condition: drawn grey, never as evidence (default: from nA, nB and the floor). */
  provisional?: boolean;
  /**
   * The running (never-widening) interval and the running minimum of p from the floor on. When a point carries
   * none of them, the chart takes them from lower, upper and p of the non-provisional points so far.
   */
  runningLower?: number | null;
  runningUpper?: number | null;
  runningP?: number | null;
}

export interface TrajectoryChartInput {
  /** Two-sided significance level of the sequence (the band is the 1 − α anytime-valid interval). */
  alpha: number;
  points: readonly TrajectoryPoint[];
  /** Answers per condition before a point counts (default 0: every point counts unless marked provisional). */
  floorPerCondition?: number;
  /** Planned answers, both conditions together (marked on the answers axis); null or absent when none. */
  plannedTotal?: number | null;
  /** Recorded group-sequential looks: their number and the answers (both conditions) they were recorded at. */
  looks?: readonly { number: number; n: number }[];
  /** Shown in the title and description (escaped). */
  measureLabel?: string;
  /** Clip the difference axis to this range (e.g. ±(max − min) of the item, beyond which no difference exists). */
  differenceLimits?: { lower: number; upper: number };
  id?: string;
}

// ---------------------------------------------------------------------------------------------------------
// Small helpers (exported for the tests and for the route that prepares the input)
// ---------------------------------------------------------------------------------------------------------

/** XML-escape text and attribute values; drops characters that XML 1.0 forbids. O(length). */
export function escapeXml(text: string): string {
  return String(text)
    // eslint-disable-next-line no-control-regex
    .replace(/[\u0000-\u0008\u000B\u000C\u000E-\u001F\uFFFE\uFFFF]/g, '')
    .replace(/&/g, '&amp;')
    .replace(/</g, '&lt;')
    .replace(/>/g, '&gt;')
    .replace(/"/g, '&quot;')
    .replace(/'/g, '&apos;');
}


/** Chart text uses the results page's number formatting (pages/format.js), so both show the same figures. */
export const formatChartNumber = formatNumber;
export { formatCount };

export function c(x: number): string {
  const r = Math.round(x * 100) / 100;
  return String(r === 0 ? 0 : r);
}

/** 32-bit FNV-1a hash of a string. O(length). */
export function hashString(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193) >>> 0;
  }
  return h >>> 0;
}

/** Finaliser of a 32-bit integer hash ("lowbias32", C. Wellons): good avalanche, cheap. O(1). */
export function mix32(x: number): number {
  x = (x ^ (x >>> 16)) >>> 0;
  x = Math.imul(x, 0x7feb352d) >>> 0;
  x = (x ^ (x >>> 15)) >>> 0;
  x = Math.imul(x, 0x846ca68b) >>> 0;
  x = (x ^ (x >>> 16)) >>> 0;
  return x;
}

export const F64 = new Float64Array(1);
export const U32 = new Uint32Array(F64.buffer);

/** Hash of a number's IEEE-754 bits (−0 folded into +0). O(1). */
export function hashNumber(v: number): number {
  F64[0] = v === 0 ? 0 : v;
  return mix32(U32[0] ^ mix32(U32[1] ^ 0x9e3779b9));
}

/**
 * Deterministic jitter in [−1, 1): a hash of (seed, index). The same seed and index always give the same
 * offset; different indices are spread as if uniformly at random. O(1).
 */
export function jitter(seed: number | string, index: number): number {
  const s = typeof seed === 'string' ? hashString(seed) : seed >>> 0;
  const h = mix32((s ^ mix32((index >>> 0) + 0x9e3779b9)) >>> 0);
  return h / 2147483648 - 1;
}

export function checkSorted(values: ArrayLike<number>, name: string): void {
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (typeof v !== 'number' || !Number.isFinite(v)) throw new RangeError(`${name}[${i}] is ${String(v)}; every value must be a finite number`);
    if (i > 0 && v < values[i - 1]) throw new RangeError(`${name}[${i}] = ${v} is smaller than ${name}[${i - 1}] = ${values[i - 1]}; sorted values were expected`);
  }
}

export function checkCounts(values: ArrayLike<number>, counts: ArrayLike<number>, name: string): number {
  if (counts.length !== values.length) throw new RangeError(`${name}: points and counts differ in length (${values.length} and ${counts.length})`);
  let total = 0;
  for (let i = 0; i < counts.length; i++) {
    const k = counts[i];
    if (typeof k !== 'number' || !Number.isInteger(k) || k < 0) throw new RangeError(`${name}.counts[${i}] is ${String(k)}; counts must be whole numbers ≥ 0`);
    total += k;
  }
  return total;
}

/**
 * At most `max` order statistics of a sorted sample, evenly spaced in rank: with N answers and N > max,
 * the ranks round(i·(N − 1)/(max − 1)) for i = 0 … max − 1 (so the minimum and the maximum are always
 * kept). With `counts`, `values` are distinct values and counts[i] answers equal values[i] (ranks are
 * walked through the cumulative counts, never expanded). N ≤ max returns every answer.
 * O(K + m) for K values and m returned points.
 */
export function subsampleSorted(values: ArrayLike<number>, max: number, counts?: ArrayLike<number>): Float64Array {
  if (!Number.isInteger(max) || max < 1) throw new RangeError(`max is ${String(max)}; it must be a whole number ≥ 1`);
  checkSorted(values, 'values');
  const total = counts ? checkCounts(values, counts, 'values') : values.length;
  const m = Math.min(total, max);
  const out = new Float64Array(m);
  if (m === 0) return out;
  const rankOf = (i: number): number => (total <= max ? i : m === 1 ? 0 : Math.round((i * (total - 1)) / (m - 1)));
  if (!counts) {
    for (let i = 0; i < m; i++) out[i] = values[rankOf(i)];
    return out;
  }
  let k = 0;
  let cumulative = counts.length > 0 ? counts[0] : 0; // ranks < cumulative belong to values[k]
  for (let i = 0; i < m; i++) {
    const r = rankOf(i);
    while (r >= cumulative) {
      k++;
      cumulative += counts[k];
    }
    out[i] = values[k];
  }
  return out;
}

/**
 * Tukey whisker ends: the smallest answer ≥ q1 − k·IQR and the largest answer ≤ q3 + k·IQR (k = 1.5),
 * from sorted (or distinct sorted) values. Null for an empty sample. O(log K) by binary search.
 */
export function whiskers(sortedValues: ArrayLike<number>, q1: number, q3: number, k = 1.5): { low: number; high: number } | null {
  const len = sortedValues.length;
  if (len === 0) return null;
  if (!Number.isFinite(q1) || !Number.isFinite(q3) || q3 < q1) throw new RangeError(`q1 = ${q1} and q3 = ${q3} must be finite with q1 ≤ q3`);
  const iqr = q3 - q1;
  const lowFence = q1 - k * iqr;
  const highFence = q3 + k * iqr;
  // first index with value ≥ lowFence
  let lo = 0;
  let hi = len;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (sortedValues[mid] < lowFence) lo = mid + 1;
    else hi = mid;
  }
  const first = lo;
  // last index with value ≤ highFence
  lo = 0;
  hi = len;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (sortedValues[mid] <= highFence) lo = mid + 1;
    else hi = mid;
  }
  const last = lo - 1;
  if (first >= len || last < 0 || first > last) return { low: q1, high: q3 };
  return { low: Math.min(sortedValues[first], q1), high: Math.max(sortedValues[last], q3) };
}

/**
 * The chart input for one condition from its Sample (distinct values + counts) and its GroupSummary:
 * whiskers from the values, points as an evenly spaced subsample of at most `maxPoints` order statistics.
 * O(K + maxPoints).
 */
export function distributionGroupFromSample(label: string, sample: Sample, summary: GroupSummary, maxPoints = 2000): DistributionGroup {
  const w = summary.q1 !== null && summary.q3 !== null ? whiskers(sample.values, summary.q1, summary.q3) : null;
  return {
    label,
    n: summary.n,
    q1: summary.q1,
    median: summary.median,
    q3: summary.q3,
    mean: summary.mean,
    whiskerLow: w ? w.low : null,
    whiskerHigh: w ? w.high : null,
    points: subsampleSorted(sample.values, maxPoints, sample.counts),
    totalN: sample.n,
  };
}

/**
 * "Nice" tick values covering [min, max]: steps of 1, 2 or 5 × 10^k giving about `target` intervals, plus
 * min and max themselves (ticks closer than 40 % of a step to either end are dropped). Whole-number scales
 * with at most 12 values get a tick at every value. O(number of ticks).
 */
export function niceTicks(min: number, max: number, target = 6, integer = false): number[] {
  if (!(max > min)) return [min];
  if (integer && Number.isInteger(min) && Number.isInteger(max) && max - min <= 12) {
    const out: number[] = [];
    for (let v = min; v <= max; v++) out.push(v);
    return out;
  }
  const raw = (max - min) / target;
  const pow = Math.pow(10, Math.floor(Math.log10(raw)));
  const frac = raw / pow;
  let step = (frac < 1.5 ? 1 : frac < 3 ? 2 : frac < 7 ? 5 : 10) * pow;
  if (integer && step < 1) step = 1;
  const out: number[] = [min];
  const start = Math.ceil(min / step) * step;
  for (let v = start; v < max; v += step) {
    const r = Number(v.toPrecision(12));
    if (r - min > 0.4 * step && max - r > 0.4 * step) out.push(r);
  }
  out.push(max);
  return out;
}

export function tickLabel(v: number, step: number): string {
  if (Number.isInteger(v)) return formatChartNumber(v);
  const decimals = Math.max(0, Math.min(6, -Math.floor(Math.log10(step) + 1e-9) + (Math.abs(step / Math.pow(10, Math.floor(Math.log10(step))) - 2.5) < 1e-9 ? 1 : 0)));
  const fixed = Math.abs(v).toFixed(decimals);
  return (v < 0 ? MINUS : '') + fixed;
}

export function safeId(prefix: string): string {
  return prefix.replace(/[^A-Za-z0-9_-]/g, '-');
}

// ---------------------------------------------------------------------------------------------------------
// Look: palette and type (the project's own; blue/rust differ for all common colour-vision types, and every
// group is also told apart by position and its printed label, so colour is never the only carrier)
// ---------------------------------------------------------------------------------------------------------

/** Group colours: blue, rust, plum, teal, olive, slate. Each ≥ 4.5:1 against white. */
export const PALETTE = Object.freeze(['#2b5e8c', '#a04b1a', '#6b4a8a', '#1d6b66', '#5f6322', '#4a5563']);
export const INK = '#1d232b'; // text, ≈ 15.6:1 on white
export const MUTED = '#4b5563'; // secondary text, ≈ 7.6:1 on white
export const RULE = '#d3d9e0'; // grid lines (decorative)
export const AXIS = '#6b7480'; // axis line and ticks, ≥ 3:1 (non-text graphics)
export const FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif";

export function text(x: number, y: number, content: string, attrs: Record<string, string | number> = {}): string {
  const a = Object.entries(attrs)
    .map(([k, v]) => ` ${k}="${escapeXml(String(v))}"`)
    .join('');
  return `<text x="${c(x)}" y="${c(y)}"${a}>${escapeXml(content)}</text>`;
}

/** Characters of a condition label per line under its box (15-px bold system font in a 196-px band). */
export const LABEL_LINE_CHARS = 21;

/**
 * A label as at most two lines of at most `max` characters, broken between words where possible; a longer label
 * ends with "…" (the full label is in the chart's description and in the page's table).
 */
export function wrapLabel(label: string, max: number): string[] {
  if (label.length <= max) return [label];
  const lines: string[] = [];
  let rest = label.trim();
  while (rest.length > 0 && lines.length < 2) {
    if (rest.length <= max) {
      lines.push(rest);
      rest = '';
      break;
    }
    const cut = rest.lastIndexOf(' ', max);
    const at = cut > max / 3 ? cut : max;
    lines.push(rest.slice(0, at).trimEnd());
    rest = rest.slice(at).trimStart();
  }
  if (rest.length > 0) {
    const last = lines[lines.length - 1];
    lines[lines.length - 1] = `${last.length >= max ? last.slice(0, max - 1).trimEnd() : last}…`;
  }
  return lines;
}

export function svgOpen(id: string, width: number, height: number, kind: string, title: string, desc: string): string {
  return (
    `<svg xmlns="http://www.w3.org/2000/svg" class="sb-chart sb-${kind}" role="img" ` +
    `viewBox="0 0 ${width} ${height}" width="${width}" height="${height}" ` +
    `aria-labelledby="${id}-title" aria-describedby="${id}-desc" font-family="${escapeXml(FONT)}" fill="${INK}">` +
    `<title id="${id}-title">${escapeXml(title)}</title>` +
    `<desc id="${id}-desc">${escapeXml(desc)}</desc>` +
    `<rect class="background" x="0" y="0" width="${width}" height="${height}" fill="#ffffff"/>`
  );
}

// ---------------------------------------------------------------------------------------------------------

export function checkOptionalFinite(x: number | null, name: string): void {
  if (x !== null && (typeof x !== 'number' || !Number.isFinite(x))) throw new RangeError(`${name} is ${String(x)}; it must be a finite number or null`);
}
