/**
 * Server-rendered SVG figures for the results page: a box plot with every answer drawn as a point
 * (one per condition) and the interim-monitoring trajectory (confidence sequence and always-valid p).
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
import type { Sample } from '../../stats/sample.js';
import type { GroupSummary } from '../../stats/types.js';

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
}

export interface TrajectoryPoint {
  /** Answers so far (both conditions together). */
  n: number;
  /** Always-valid p-value at that moment, in [0, 1]; null when not yet defined. */
  p: number | null;
  /** Confidence sequence for mean a − mean b at that moment; null early on (skipped). */
  lower: number | null;
  upper: number | null;
  /** Mean a − mean b at that moment (optional; drawn as a line when present). */
  estimate?: number | null;
}

export interface TrajectoryChartInput {
  /** Two-sided significance level of the sequence (the band is the 1 − α confidence sequence). */
  alpha: number;
  points: readonly TrajectoryPoint[];
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

const MINUS = '\u2212';

/**
 * Number formatting for chart text. Same rules as `formatNumber` in format.js (the page's formatter; a test
 * checks that both agree): null → "—"; whole numbers as integers with thousands separators; |x| ≥ 1e6 or
 * < 1e-4 in exponent form with 3 significant digits; otherwise 3 significant digits (trailing zeros kept,
 * at most 6 decimals); a true minus sign.
 */
export function formatChartNumber(x: number | null | undefined, digits = 3): string {
  if (x === null || x === undefined || typeof x !== 'number' || !Number.isFinite(x)) return '—';
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
  const fixed = ax.toFixed(decimals);
  const [int, frac] = fixed.split('.');
  return sign + groupThousands(int) + (frac !== undefined ? `.${frac}` : '');
}

function groupThousands(int: string): string {
  return int.replace(/\B(?=(\d{3})+(?!\d))/g, ',');
}

/** A whole count with thousands separators ("5,310"). */
export function formatCount(n: number): string {
  return groupThousands(String(Math.round(n)));
}

/** Fixed-precision coordinate: at most 2 decimals, no trailing zeros, no "-0". */
function c(x: number): string {
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
function mix32(x: number): number {
  x = (x ^ (x >>> 16)) >>> 0;
  x = Math.imul(x, 0x7feb352d) >>> 0;
  x = (x ^ (x >>> 15)) >>> 0;
  x = Math.imul(x, 0x846ca68b) >>> 0;
  x = (x ^ (x >>> 16)) >>> 0;
  return x;
}

const F64 = new Float64Array(1);
const U32 = new Uint32Array(F64.buffer);

/** Hash of a number's IEEE-754 bits (−0 folded into +0). O(1). */
function hashNumber(v: number): number {
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

function checkSorted(values: ArrayLike<number>, name: string): void {
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (typeof v !== 'number' || !Number.isFinite(v)) throw new RangeError(`${name}[${i}] is ${String(v)}; every value must be a finite number`);
    if (i > 0 && v < values[i - 1]) throw new RangeError(`${name}[${i}] = ${v} is smaller than ${name}[${i - 1}] = ${values[i - 1]}; sorted values were expected`);
  }
}

function checkCounts(values: ArrayLike<number>, counts: ArrayLike<number>, name: string): number {
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

function tickLabel(v: number, step: number): string {
  if (Number.isInteger(v)) return formatChartNumber(v);
  const decimals = Math.max(0, Math.min(6, -Math.floor(Math.log10(step) + 1e-9) + (Math.abs(step / Math.pow(10, Math.floor(Math.log10(step))) - 2.5) < 1e-9 ? 1 : 0)));
  const fixed = Math.abs(v).toFixed(decimals);
  return (v < 0 ? MINUS : '') + fixed;
}

function safeId(prefix: string): string {
  return prefix.replace(/[^A-Za-z0-9_-]/g, '-');
}

// ---------------------------------------------------------------------------------------------------------
// Look: palette and type (the project's own; blue/rust differ for all common colour-vision types, and every
// group is also told apart by position and its printed label, so colour is never the only carrier)
// ---------------------------------------------------------------------------------------------------------

/** Group colours: blue, rust, plum, teal, olive, slate. Each ≥ 4.5:1 against white. */
export const PALETTE = Object.freeze(['#2b5e8c', '#a04b1a', '#6b4a8a', '#1d6b66', '#5f6322', '#4a5563']);
const INK = '#1d232b'; // text, ≈ 15.6:1 on white
const MUTED = '#4b5563'; // secondary text, ≈ 7.6:1 on white
const RULE = '#d3d9e0'; // grid lines (decorative)
const AXIS = '#6b7480'; // axis line and ticks, ≥ 3:1 (non-text graphics)
const FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif";

function text(x: number, y: number, content: string, attrs: Record<string, string | number> = {}): string {
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

function svgOpen(id: string, width: number, height: number, kind: string, title: string, desc: string): string {
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
// Distribution chart (vertical box plots with the answers beside each box)
// ---------------------------------------------------------------------------------------------------------

const D = {
  left: 52,
  band: 196,
  right: 16,
  minWidth: 448,
  plotTop: 70,
  plotHeight: 270,
  pad: 8,
  boxOffset: 60,
  boxHalf: 20,
  pointsOffset: 136,
  pointsHalf: 42,
};

function checkOptionalFinite(x: number | null, name: string): void {
  if (x !== null && (typeof x !== 'number' || !Number.isFinite(x))) throw new RangeError(`${name} is ${String(x)}; it must be a finite number or null`);
}

/** Box plot of one measure, one box per condition with every answer (or a subsample) as a jittered point. */
export function renderDistributionChart(input: DistributionChartInput): string {
  const { scale, groups } = input;
  if (!Number.isFinite(scale.min) || !Number.isFinite(scale.max) || !(scale.max > scale.min)) {
    throw new RangeError(`scale is ${scale.min}–${scale.max}; min and max must be finite with min < max`);
  }
  const maxPoints = input.maxPoints ?? 2000;
  if (!Number.isInteger(maxPoints) || maxPoints < 1) throw new RangeError(`maxPoints is ${String(maxPoints)}; it must be a whole number ≥ 1`);
  groups.forEach((g, i) => {
    for (const key of ['q1', 'median', 'q3', 'mean', 'whiskerLow', 'whiskerHigh'] as const) checkOptionalFinite(g[key], `groups[${i}].${key}`);
    if (!Number.isInteger(g.n) || g.n < 0) throw new RangeError(`groups[${i}].n is ${String(g.n)}; it must be a whole number ≥ 0`);
  });

  const id = safeId(input.id ?? `sb-dist-${hashString(input.measureLabel).toString(36)}`);
  const width = Math.max(D.minWidth, D.left + groups.length * D.band + D.right);
  const plotBottom = D.plotTop + D.plotHeight;
  const plotRight = width - D.right;
  const y = (v: number): number => {
    const clamped = Math.min(scale.max, Math.max(scale.min, v));
    return plotBottom - D.pad - ((clamped - scale.min) / (scale.max - scale.min)) * (D.plotHeight - 2 * D.pad);
  };
  const ticks = niceTicks(scale.min, scale.max, 6, scale.integer);
  const tickStep = ticks.length > 2 ? ticks[2] - ticks[1] : scale.max - scale.min;
  const labelTop = plotBottom + 24;
  // Condition labels longer than one line (about 21 characters at this size in a 196-px band) wrap onto a
  // second line, and everything below moves down by one line.
  const labelLines = groups.map((g) => wrapLabel(g.label, LABEL_LINE_CHARS));
  const extra = labelLines.some((l) => l.length > 1) ? 17 : 0;
  const legendTop = labelTop + 62 + extra;
  const height = legendTop + 64;

  // Per-group drawn points and the summary sentence.
  const drawn = groups.map((g, i) => {
    const pts = subsampleSorted(g.points, maxPoints, g.counts);
    const available = g.counts ? checkCounts(g.points, g.counts, `groups[${i}].points`) : g.points.length;
    const totalN = g.totalN ?? Math.max(g.n, available);
    return { pts, totalN, subsampled: pts.length < totalN };
  });

  const scaleText = `${formatChartNumber(scale.min)} to ${formatChartNumber(scale.max)}${scale.integer ? ', whole numbers' : ''}`;
  const title = `${input.measureLabel}: answers by condition`;
  const descParts = [
    `Box plots of ${input.measureLabel} on a scale from ${scaleText}, one per condition, with each answer drawn as a dot beside its box.`,
  ];
  groups.forEach((g, i) => {
    if (g.n === 0 || g.median === null) {
      descParts.push(`${g.label}: no answers yet.`);
      return;
    }
    const d = drawn[i];
    descParts.push(
      `${g.label}: ${formatCount(g.n)} ${g.n === 1 ? 'answer' : 'answers'}, median ${formatChartNumber(g.median)}, mean ${formatChartNumber(g.mean)}` +
        (g.q1 !== null && g.q3 !== null ? `, middle half from ${formatChartNumber(g.q1)} to ${formatChartNumber(g.q3)}` : '') +
        (g.whiskerLow !== null && g.whiskerHigh !== null ? `, whiskers from ${formatChartNumber(g.whiskerLow)} to ${formatChartNumber(g.whiskerHigh)}` : '') +
        (d.subsampled ? `; showing ${formatCount(d.pts.length)} of ${formatCount(d.totalN)} answers` : '') +
        '.',
    );
  });

  const out: string[] = [svgOpen(id, width, height, 'distribution', title, descParts.join(' '))];
  out.push(text(16, 26, input.measureLabel, { class: 'chart-title', 'font-size': 17, 'font-weight': 600 }));
  out.push(
    text(16, 48, `Scale ${scaleText}. Each dot is one answer.`, { class: 'chart-subtitle', 'font-size': 13, fill: MUTED }),
  );

  // Axis and grid.
  out.push(`<g class="axis axis-value" data-min="${escapeXml(String(scale.min))}" data-max="${escapeXml(String(scale.max))}" font-size="14" fill="${MUTED}">`);
  for (const t of ticks) {
    const ty = y(t);
    out.push(`<line class="grid" x1="${D.left}" x2="${c(plotRight)}" y1="${c(ty)}" y2="${c(ty)}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(`<line class="tick" x1="${D.left - 6}" x2="${D.left}" y1="${c(ty)}" y2="${c(ty)}" stroke="${AXIS}" stroke-width="1"/>`);
    out.push(text(D.left - 10, ty + 4.5, tickLabel(t, tickStep), { 'text-anchor': 'end', class: 'tick-label', 'data-value': String(t) }));
  }
  out.push(`<line class="axis-line" x1="${D.left}" x2="${D.left}" y1="${c(y(scale.max))}" y2="${c(y(scale.min))}" stroke="${AXIS}" stroke-width="1"/>`);
  out.push('</g>');

  groups.forEach((g, i) => {
    const colour = PALETTE[i % PALETTE.length];
    const x0 = D.left + i * D.band;
    const bx = x0 + D.boxOffset;
    const px = x0 + D.pointsOffset;
    const d = drawn[i];
    out.push(
      `<g class="group" data-group="${i}" data-label="${escapeXml(g.label)}" data-n="${g.n}" data-points="${d.pts.length}" data-total="${d.totalN}">`,
    );
    // Points (decorative for assistive technology: the desc and the page's table carry the numbers).
    if (d.pts.length > 0) {
      const m = d.pts.length;
      const r = m <= 100 ? 3 : m <= 500 ? 2.4 : 1.8;
      const opacity = m <= 100 ? 0.75 : m <= 500 ? 0.55 : m <= 1000 ? 0.42 : 0.32;
      out.push(`<g class="points" aria-hidden="true" fill="${colour}" fill-opacity="${opacity}">`);
      // Runs of equal values: sideways spread in proportion to the run length (integer items), so the
      // cloud's width shows how common each answer is; continuous items spread evenly.
      let maxRun = 1;
      for (let s = 0; s < m; ) {
        let e = s + 1;
        while (e < m && d.pts[e] === d.pts[s]) e++;
        maxRun = Math.max(maxRun, e - s);
        s = e;
      }
      const seed = hashString(input.measureLabel + '\u0000' + g.label);
      const step = (D.plotHeight - 2 * D.pad) / (scale.max - scale.min);
      const yJitter = scale.integer ? Math.min(0.16 * step, 4) : 0;
      for (let s = 0; s < m; ) {
        let e = s + 1;
        while (e < m && d.pts[e] === d.pts[s]) e++;
        const v = d.pts[s];
        const run = e - s;
        const half = scale.integer ? D.pointsHalf * Math.max(0.15, Math.sqrt(run / maxRun)) : D.pointsHalf * 0.85;
        const vSeed = (seed ^ hashNumber(v)) >>> 0;
        for (let k = 0; k < run; k++) {
          const jx = run === 1 && scale.integer ? 0 : jitter(vSeed, 2 * k) * half;
          const jy = yJitter > 0 ? jitter(vSeed, 2 * k + 1) * yJitter : 0;
          out.push(`<circle cx="${c(px + jx)}" cy="${c(y(v) + jy)}" r="${r}"/>`);
        }
        s = e;
      }
      out.push('</g>');
    }
    if (g.n > 0 && g.q1 !== null && g.q3 !== null && g.median !== null) {
      const top = y(g.q3);
      const bottom = y(g.q1);
      if (g.whiskerLow !== null && g.whiskerHigh !== null) {
        out.push(`<g class="whiskers" stroke="${colour}" stroke-width="1.75" fill="none">`);
        out.push(`<line class="whisker whisker-high" x1="${c(bx)}" x2="${c(bx)}" y1="${c(y(g.whiskerHigh))}" y2="${c(top)}"/>`);
        out.push(`<line class="whisker whisker-low" x1="${c(bx)}" x2="${c(bx)}" y1="${c(bottom)}" y2="${c(y(g.whiskerLow))}"/>`);
        out.push(`<line class="whisker-cap" x1="${c(bx - 9)}" x2="${c(bx + 9)}" y1="${c(y(g.whiskerHigh))}" y2="${c(y(g.whiskerHigh))}"/>`);
        out.push(`<line class="whisker-cap" x1="${c(bx - 9)}" x2="${c(bx + 9)}" y1="${c(y(g.whiskerLow))}" y2="${c(y(g.whiskerLow))}"/>`);
        out.push('</g>');
      }
      out.push(
        `<rect class="box" x="${c(bx - D.boxHalf)}" y="${c(top)}" width="${2 * D.boxHalf}" height="${c(Math.max(1, bottom - top))}" fill="${colour}" fill-opacity="0.14" stroke="${colour}" stroke-width="2" data-q1="${g.q1}" data-q3="${g.q3}"/>`,
      );
      out.push(
        `<line class="median-mark" x1="${c(bx - D.boxHalf)}" x2="${c(bx + D.boxHalf)}" y1="${c(y(g.median))}" y2="${c(y(g.median))}" stroke="${INK}" stroke-width="3.5" data-value="${g.median}"/>`,
      );
      if (g.mean !== null) {
        const my = y(g.mean);
        out.push(
          `<path class="mean-mark" d="M${c(bx)} ${c(my - 7)}L${c(bx + 7)} ${c(my)}L${c(bx)} ${c(my + 7)}L${c(bx - 7)} ${c(my)}Z" fill="#ffffff" stroke="${INK}" stroke-width="2" data-value="${g.mean}"/>`,
        );
      }
    } else {
      out.push(text(x0 + D.band / 2, D.plotTop + D.plotHeight / 2, 'no answers yet', { 'text-anchor': 'middle', 'font-size': 13, fill: MUTED, class: 'empty-note' }));
    }
    // Label, n and (if any) the subsample note under the group.
    const cx = x0 + D.band / 2;
    out.push(`<rect class="group-key" x="${c(cx - 6)}" y="${labelTop - 17}" width="12" height="4" fill="${colour}"/>`);
    labelLines[i].forEach((line, k) => {
      out.push(text(cx, labelTop + 2 + 17 * k, line, { 'text-anchor': 'middle', 'font-size': 15, 'font-weight': 600, class: k === 0 ? 'group-label' : 'group-label group-label-more' }));
    });
    out.push(text(cx, labelTop + 20 + extra, `n = ${formatCount(g.n)}`, { 'text-anchor': 'middle', 'font-size': 14, fill: MUTED, class: 'group-n' }));
    if (d.subsampled) {
      out.push(
        text(cx, labelTop + 37 + extra, `showing ${formatCount(d.pts.length)} of ${formatCount(d.totalN)} answers`, {
          'text-anchor': 'middle',
          'font-size': 11.5,
          fill: MUTED,
          class: 'subsample-note',
        }),
      );
    }
    out.push('</g>');
  });

  // Legend (neutral ink so it describes marks, not groups).
  const lx1 = 16;
  const lx2 = Math.round(width / 2) + 4;
  const ly = legendTop;
  out.push(`<g class="legend" font-size="13" fill="${MUTED}">`);
  out.push(`<circle cx="${lx1 + 8}" cy="${ly}" r="3" fill="${MUTED}"/>`);
  out.push(text(lx1 + 22, ly + 4, 'one answer', {}));
  out.push(`<rect x="${lx1}" y="${ly + 14}" width="16" height="12" fill="${MUTED}" fill-opacity="0.14" stroke="${MUTED}" stroke-width="1.5"/>`);
  out.push(text(lx1 + 22, ly + 24, 'box: middle half (Q1–Q3)', {}));
  out.push(`<line x1="${lx1}" x2="${lx1 + 16}" y1="${ly + 40}" y2="${ly + 40}" stroke="${INK}" stroke-width="3.5"/>`);
  out.push(text(lx1 + 22, ly + 44, 'median', {}));
  out.push(`<path class="legend-mean" d="M${lx2 + 8} ${ly - 6}L${lx2 + 14} ${ly}L${lx2 + 8} ${ly + 6}L${lx2 + 2} ${ly}Z" fill="#ffffff" stroke="${INK}" stroke-width="2"/>`);
  out.push(text(lx2 + 22, ly + 4, 'mean', {}));
  out.push(`<line x1="${lx2 + 8}" x2="${lx2 + 8}" y1="${ly + 13}" y2="${ly + 27}" stroke="${MUTED}" stroke-width="1.75"/>`);
  out.push(`<line x1="${lx2 + 2}" x2="${lx2 + 14}" y1="${ly + 13}" y2="${ly + 13}" stroke="${MUTED}" stroke-width="1.75"/>`);
  out.push(text(lx2 + 22, ly + 24, 'whiskers: furthest answers', {}));
  out.push(text(lx2 + 22, ly + 40, 'within 1.5 × IQR of the box', {}));
  out.push('</g>');
  out.push('</svg>');
  return out.join('');
}

// ---------------------------------------------------------------------------------------------------------
// Trajectory chart (confidence sequence band over time, always-valid p below)
// ---------------------------------------------------------------------------------------------------------

const T = { width: 420, left: 52, right: 24, top1: 62, h1: 170, top2: 282, h2: 104 };
const BLUE = PALETTE[0];
const RUST = PALETTE[1];

/** Maximal runs of consecutive items for which `pick` gives a value (a null ends the run), in order. */
function contiguousRuns<T, U>(items: readonly T[], pick: (item: T) => U | null): U[][] {
  const runs: U[][] = [];
  let current: U[] = [];
  for (const item of items) {
    const v = pick(item);
    if (v !== null) current.push(v);
    else if (current.length > 0) {
      runs.push(current);
      current = [];
    }
  }
  if (current.length > 0) runs.push(current);
  return runs;
}

/** A polyline through a run of "x,y" points, or a dot when the run has a single point. */
function lineOrDot(cls: string, run: string[], color: string): string {
  if (run.length > 1) return `<polyline class="${cls}" points="${run.join(' ')}" fill="none" stroke="${color}" stroke-width="2"/>`;
  const [cx, cy] = run[0].split(',');
  return `<circle class="${cls}" cx="${cx}" cy="${cy}" r="3" fill="${color}"/>`;
}

function pLabel(exp: number): string {
  if (exp === 0) return '1';
  if (exp >= -3) return (10 ** exp).toFixed(-exp);
  return `1e${MINUS}${-exp}`;
}

/** Line chart of the confidence sequence for the mean difference and of the always-valid p as answers arrive. */
export function renderTrajectoryChart(input: TrajectoryChartInput): string {
  const { alpha } = input;
  if (!(alpha > 0 && alpha < 1)) throw new RangeError(`alpha is ${String(alpha)}; it must lie in (0, 1)`);
  input.points.forEach((p, i) => {
    if (typeof p.n !== 'number' || !Number.isFinite(p.n) || p.n < 0) throw new RangeError(`points[${i}].n is ${String(p.n)}; it must be a finite number ≥ 0`);
    checkOptionalFinite(p.lower, `points[${i}].lower`);
    checkOptionalFinite(p.upper, `points[${i}].upper`);
    checkOptionalFinite(p.estimate ?? null, `points[${i}].estimate`);
    if (p.p !== null && (typeof p.p !== 'number' || !(p.p >= 0 && p.p <= 1))) throw new RangeError(`points[${i}].p is ${String(p.p)}; it must lie in [0, 1] or be null`);
    if (p.lower !== null && p.upper !== null && p.lower > p.upper) throw new RangeError(`points[${i}]: lower ${p.lower} exceeds upper ${p.upper}`);
  });
  const pts = [...input.points].sort((a, b) => a.n - b.n);
  const label = input.measureLabel ?? 'the measure';
  const id = safeId(input.id ?? `sb-traj-${hashString(label).toString(36)}`);
  const level = 1 - alpha;
  const levelText = `${Number((level * 100).toPrecision(6))}%`;
  const alphaText = String(Number(alpha.toPrecision(4))); // 0.05, not 0.0500
  const { width, left, right, top1, h1, top2, h2 } = T;
  const plotRight = width - right;
  const height = top2 + h2 + 46;

  const withBand = pts.filter((p) => p.lower !== null && p.upper !== null);
  const withP = pts.filter((p) => p.p !== null);
  const last = pts.length > 0 ? pts[pts.length - 1] : null;
  const lastBand = withBand.length > 0 ? withBand[withBand.length - 1] : null;
  const lastP = withP.length > 0 ? withP[withP.length - 1] : null;
  const firstBelow = withP.find((p) => (p.p as number) <= alpha) ?? null;

  const title = `Interim monitoring of ${label}: confidence sequence and always-valid p as answers arrived`;
  const desc: string[] = [];
  if (!last) desc.push('No interim results yet.');
  else {
    desc.push(`Tracked from ${formatCount(pts[0].n)} to ${formatCount(last.n)} answers.`);
    if (lastBand) {
      desc.push(
        `After ${formatCount(lastBand.n)} answers the ${levelText} confidence sequence for the mean difference (a − b) runs from ${formatChartNumber(lastBand.lower)} to ${formatChartNumber(lastBand.upper)}` +
          `${(lastBand.lower as number) > 0 || (lastBand.upper as number) < 0 ? ', which excludes zero' : ', which includes zero'}.`,
      );
    } else desc.push('The confidence sequence is not defined yet.');
    if (lastP) desc.push(`The always-valid p is ${formatChartNumber(lastP.p)}.`);
    desc.push(
      firstBelow
        ? `It first fell to α = ${alphaText} or below after ${formatCount(firstBelow.n)} answers.`
        : `It has not fallen to α = ${alphaText}.`,
    );
  }

  const out: string[] = [svgOpen(id, width, height, 'trajectory', title, desc.join(' '))];
  out.push(text(16, 24, 'Mean difference (a − b) as answers arrived', { 'font-size': 15, 'font-weight': 600, class: 'chart-title' }));
  out.push(text(16, 44, `Shaded: ${levelText} confidence sequence, valid at every look.`, { 'font-size': 12.5, fill: MUTED, class: 'chart-subtitle' }));

  // x scale shared by both panels.
  const nMin = pts.length > 1 ? pts[0].n : 0;
  const nMax = pts.length > 0 ? Math.max(pts[pts.length - 1].n, nMin + 1) : 1;
  const x = (n: number): number => left + ((n - nMin) / (nMax - nMin)) * (plotRight - left);
  const xTicks = niceTicks(nMin, nMax, 5, true);
  const xStep = xTicks.length > 2 ? xTicks[2] - xTicks[1] : nMax - nMin;

  // Panel 1: difference.
  const values: number[] = [0];
  for (const p of withBand) values.push(p.lower as number, p.upper as number);
  for (const p of pts) if (p.estimate !== undefined && p.estimate !== null) values.push(p.estimate);
  let dLo = Math.min(...values);
  let dHi = Math.max(...values);
  if (input.differenceLimits) {
    const { lower, upper } = input.differenceLimits;
    if (!Number.isFinite(lower) || !Number.isFinite(upper) || !(upper > lower)) throw new RangeError('differenceLimits must be finite with lower < upper');
    dLo = Math.max(dLo, lower);
    dHi = Math.min(dHi, upper);
    if (!(dHi > dLo)) {
      dLo = lower;
      dHi = upper;
    }
  }
  if (!(dHi > dLo)) {
    dLo -= 1;
    dHi += 1;
  }
  const padD = (dHi - dLo) * 0.06;
  dLo -= padD;
  dHi += padD;
  const yD = (v: number): number => top1 + h1 - ((Math.min(dHi, Math.max(dLo, v)) - dLo) / (dHi - dLo)) * h1;
  const dTicksAll = niceTicks(dLo, dHi, 4).slice(1, -1);
  const dTicks = dTicksAll.length > 0 ? dTicksAll : [0];
  const dStep = dTicks.length > 1 ? dTicks[1] - dTicks[0] : 1;

  out.push(`<g class="panel panel-difference" font-size="13" fill="${MUTED}">`);
  for (const t of dTicks) {
    out.push(`<line class="grid" x1="${left}" x2="${plotRight}" y1="${c(yD(t))}" y2="${c(yD(t))}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(text(left - 8, yD(t) + 4, tickLabel(t, dStep), { 'text-anchor': 'end', class: 'tick-label' }));
  }
  out.push(`<rect x="${left}" y="${top1}" width="${plotRight - left}" height="${h1}" fill="none" stroke="${AXIS}" stroke-width="1"/>`);
  // Band, in contiguous runs of defined bounds.
  const runs = contiguousRuns(pts, (p) => (p.lower !== null && p.upper !== null ? p : null));
  for (const run of runs) {
    if (run.length === 1) {
      const p = run[0];
      out.push(`<line class="band band-single" x1="${c(x(p.n))}" x2="${c(x(p.n))}" y1="${c(yD(p.upper as number))}" y2="${c(yD(p.lower as number))}" stroke="${BLUE}" stroke-width="3" stroke-opacity="0.5"/>`);
      continue;
    }
    const upper = run.map((p) => `${c(x(p.n))},${c(yD(p.upper as number))}`);
    const lower = run.map((p) => `${c(x(p.n))},${c(yD(p.lower as number))}`).reverse();
    out.push(`<polygon class="band" points="${[...upper, ...lower].join(' ')}" fill="${BLUE}" fill-opacity="0.2" stroke="${BLUE}" stroke-opacity="0.55" stroke-width="1"/>`);
  }
  out.push(`<line class="zero-line" x1="${left}" x2="${plotRight}" y1="${c(yD(0))}" y2="${c(yD(0))}" stroke="${INK}" stroke-width="1.25" stroke-dasharray="5 4"/>`);
  out.push(text(plotRight - 4, yD(0) - 5, 'no difference', { 'text-anchor': 'end', 'font-size': 12, fill: INK, class: 'zero-label' }));
  // Estimate line, if given.
  const estRuns = contiguousRuns(pts, (p) =>
    p.estimate !== undefined && p.estimate !== null ? `${c(x(p.n))},${c(yD(p.estimate))}` : null,
  );
  for (const r of estRuns) out.push(lineOrDot('estimate', r, BLUE));
  if (runs.length === 0) out.push(text((left + plotRight) / 2, top1 + h1 / 2, 'not enough answers yet', { 'text-anchor': 'middle', 'font-size': 13, fill: MUTED, class: 'empty-note' }));
  out.push('</g>');

  // Panel 2: always-valid p on a log scale.
  const positive = withP.map((p) => p.p as number).filter((p) => p > 0);
  const smallest = Math.min(alpha, ...positive);
  const lowExp = Math.max(-12, Math.min(-2, Math.floor(Math.log10(smallest))));
  const floorP = 10 ** lowExp;
  const yP = (p: number): number => top2 + ((0 - Math.log10(Math.max(floorP, Math.min(1, p)))) / (0 - lowExp)) * h2;
  out.push(
    text(16, top2 - 12, `Always-valid p, log scale · dashed line: α = ${alphaText}`, { 'font-size': 12.5, fill: MUTED, class: 'panel-title' }),
  );
  out.push(`<g class="panel panel-p" font-size="13" fill="${MUTED}">`);
  const expStep = -lowExp > 6 ? 2 : 1;
  for (let e = 0; e >= lowExp; e -= expStep) {
    out.push(`<line class="grid" x1="${left}" x2="${plotRight}" y1="${c(yP(10 ** e))}" y2="${c(yP(10 ** e))}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(text(left - 8, yP(10 ** e) + 4, pLabel(e), { 'text-anchor': 'end', class: 'tick-label' }));
  }
  out.push(`<rect x="${left}" y="${top2}" width="${plotRight - left}" height="${h2}" fill="none" stroke="${AXIS}" stroke-width="1"/>`);
  out.push(`<line class="alpha-line" x1="${left}" x2="${plotRight}" y1="${c(yP(alpha))}" y2="${c(yP(alpha))}" stroke="${INK}" stroke-width="1.25" stroke-dasharray="5 4"/>`);
  const pRuns = contiguousRuns(pts, (p) => (p.p !== null ? `${c(x(p.n))},${c(yP(p.p))}` : null));
  for (const r of pRuns) out.push(lineOrDot('p-line', r, RUST));
  if (firstBelow) {
    const fx = x(firstBelow.n);
    const fy = yP(firstBelow.p as number);
    out.push(`<circle class="first-crossing" cx="${c(fx)}" cy="${c(fy)}" r="5" fill="#ffffff" stroke="${INK}" stroke-width="2"/>`);
    const labelLeft = fx - left > 110;
    out.push(
      // Below the line on the side it came from (a falling p leaves that corner empty), above it near the floor.
      text(labelLeft ? fx - 9 : fx + 9, fy + 20 <= top2 + h2 - 4 ? fy + 20 : fy - 10, `first p ≤ α (n = ${formatCount(firstBelow.n)})`, {
        'text-anchor': labelLeft ? 'end' : 'start',
        'font-size': 12,
        fill: INK,
        class: 'first-crossing-label',
      }),
    );
  }
  out.push('</g>');

  // x axis under panel 2.
  out.push(`<g class="axis axis-n" font-size="13" fill="${MUTED}">`);
  for (const t of xTicks) {
    out.push(`<line class="tick" x1="${c(x(t))}" x2="${c(x(t))}" y1="${top2 + h2}" y2="${top2 + h2 + 5}" stroke="${AXIS}" stroke-width="1"/>`);
    out.push(text(x(t), top2 + h2 + 19, tickLabel(t, xStep), { 'text-anchor': 'middle', class: 'tick-label' }));
  }
  out.push(text((left + plotRight) / 2, top2 + h2 + 38, 'answers so far', { 'text-anchor': 'middle', fill: INK, class: 'axis-title' }));
  out.push('</g>');
  out.push('</svg>');
  return out.join('');
}
