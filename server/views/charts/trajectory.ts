/**
 * The trajectory chart of interim monitoring (SVG string; see common.ts): one figure over "answers so far".
 *
 * Main panel: the current estimate of mean a − mean b as a line, and the running anytime-valid interval (the
 * intersection of the confidence sequence from the floor on, which never widens) as a step band: each step holds
 * what was known at one checkpoint until the next. The planned size (in place when it is near; otherwise a label
 * pointing right) and every recorded look are marked on the answers axis. Points before the floor of answers per condition are drawn grey (estimate only) in a shaded
 * "too early" zone: no interval, no p, no crossing is shown for them.
 * Strip below, titled "How the evidence accumulated": the running anytime-valid p on a log scale with the α line,
 * and the first point where it reached α (never before the floor).
 *
 * Cost: O(points + looks).
 */
import { MINUS } from '../../pages/format.js';
import { AXIS, INK, MUTED, PALETTE, RULE, TrajectoryChartInput, TrajectoryPoint, c, checkOptionalFinite, formatChartNumber, formatCount, hashString, niceTicks, safeId, svgOpen, text, tickLabel } from './common.js';

const T = { width: 520, left: 56, right: 28, top1: 84, h1: 200, strip: 72 };
const BLUE = PALETTE[0];
const RUST = PALETTE[1];
const GREY = '#8a929c'; // provisional estimate (≥ 3:1 on white and on the early zone)
const EARLY = '#eef0f3'; // the too-early zone (decorative)

/** A point as drawn: provisional or not, and its running values. */
interface Drawn {
  n: number;
  provisional: boolean;
  estimate: number | null;
  lower: number | null;
  upper: number | null;
  p: number | null;
}

/** Provisional flags and running values of each point (see the header and TrajectoryPoint). O(points). */
function drawnPoints(pts: readonly TrajectoryPoint[], floor: number): Drawn[] {
  const given = pts.some((p) => p.runningLower !== undefined || p.runningUpper !== undefined || p.runningP !== undefined);
  let lo: number | null = null;
  let hi: number | null = null;
  let minP: number | null = null;
  let emptied = false;
  return pts.map((p) => {
    const provisional = p.provisional ?? (p.nA !== undefined && p.nB !== undefined ? Math.min(p.nA, p.nB) < floor : false);
    const estimate = p.estimate ?? null;
    if (provisional) return { n: p.n, provisional, estimate, lower: null, upper: null, p: null };
    if (given) return { n: p.n, provisional, estimate, lower: p.runningLower ?? null, upper: p.runningUpper ?? null, p: p.runningP ?? null };
    if (p.p !== null) minP = minP === null ? p.p : Math.min(minP, p.p);
    if (p.lower !== null && p.upper !== null && !emptied) {
      lo = lo === null ? p.lower : Math.max(lo, p.lower);
      hi = hi === null ? p.upper : Math.min(hi, p.upper);
      if (lo > hi) {
        emptied = true;
        lo = null;
        hi = null;
      }
    }
    // A gap in the given bounds breaks the band (the running values go on underneath).
    const defined = p.lower !== null && p.upper !== null;
    return { n: p.n, provisional, estimate, lower: defined ? lo : null, upper: defined ? hi : null, p: p.p === null ? null : minP };
  });
}

/** Maximal runs of consecutive items for which `keep` holds, in order. */
function runsOf<T>(items: readonly T[], keep: (item: T) => boolean): T[][] {
  const runs: T[][] = [];
  let current: T[] = [];
  for (const item of items) {
    if (keep(item)) current.push(item);
    else if (current.length > 0) {
      runs.push(current);
      current = [];
    }
  }
  if (current.length > 0) runs.push(current);
  return runs;
}

/** A polyline through "x,y" points, or a dot when there is one. */
function lineOrDot(cls: string, pts: string[], color: string, extra = ''): string {
  if (pts.length > 1) return `<polyline class="${cls}" points="${pts.join(' ')}" fill="none" stroke="${color}" stroke-width="2"${extra}/>`;
  const [cx, cy] = pts[0].split(',');
  return `<circle class="${cls}" cx="${cx}" cy="${cy}" r="3" fill="${color}"/>`;
}

/** Step-after outline: value i holds from x_i to x_{i+1}. */
function stepPoints(xs: number[], ys: number[]): string[] {
  const out: string[] = [];
  for (let i = 0; i < xs.length; i++) {
    if (i > 0) out.push(`${c(xs[i])},${c(ys[i - 1])}`);
    out.push(`${c(xs[i])},${c(ys[i])}`);
  }
  return out;
}

function pLabel(exp: number): string {
  if (exp === 0) return '1';
  if (exp >= -3) return (10 ** exp).toFixed(-exp);
  return `1e${MINUS}${-exp}`;
}

/** The estimate and running anytime-valid interval over answers received, with the evidence strip (see the header). */
export function renderTrajectoryChart(input: TrajectoryChartInput): string {
  const { alpha } = input;
  if (!(alpha > 0 && alpha < 1)) throw new RangeError(`alpha is ${String(alpha)}; it must lie in (0, 1)`);
  input.points.forEach((p, i) => {
    if (typeof p.n !== 'number' || !Number.isFinite(p.n) || p.n < 0) throw new RangeError(`points[${i}].n is ${String(p.n)}; it must be a finite number ≥ 0`);
    checkOptionalFinite(p.lower, `points[${i}].lower`);
    checkOptionalFinite(p.upper, `points[${i}].upper`);
    checkOptionalFinite(p.estimate ?? null, `points[${i}].estimate`);
    checkOptionalFinite(p.runningLower ?? null, `points[${i}].runningLower`);
    checkOptionalFinite(p.runningUpper ?? null, `points[${i}].runningUpper`);
    for (const [name, v] of [['p', p.p], ['runningP', p.runningP ?? null]] as const) {
      if (v !== null && (typeof v !== 'number' || !(v >= 0 && v <= 1))) throw new RangeError(`points[${i}].${name} is ${String(v)}; it must lie in [0, 1] or be null`);
    }
    if (p.lower !== null && p.upper !== null && p.lower > p.upper) throw new RangeError(`points[${i}]: lower ${p.lower} exceeds upper ${p.upper}`);
  });
  const floor = input.floorPerCondition ?? 0;
  if (!(Number.isFinite(floor) && floor >= 0)) throw new RangeError(`floorPerCondition is ${String(floor)}; it must be a finite number ≥ 0`);
  const planned = input.plannedTotal ?? null;
  if (planned !== null && !(Number.isFinite(planned) && planned > 0)) throw new RangeError(`plannedTotal is ${String(planned)}; it must be a finite number > 0 or null`);
  const looks = (input.looks ?? []).filter((l) => Number.isFinite(l.n) && l.n >= 0);

  const pts = drawnPoints(
    [...input.points].sort((a, b) => a.n - b.n),
    floor,
  );
  const label = input.measureLabel ?? 'the measure';
  const id = safeId(input.id ?? `sb-traj-${hashString(label).toString(36)}`);
  const levelText = `${Number(((1 - alpha) * 100).toPrecision(6))}%`;
  const alphaText = String(Number(alpha.toPrecision(4))); // 0.05, not 0.0500
  const { width, left, right, top1, h1, strip } = T;
  const plotRight = width - right;
  const top2 = top1 + h1 + 70;
  const height = top2 + strip + 50;

  const counted = pts.filter((p) => !p.provisional);
  const withBand = counted.filter((p) => p.lower !== null && p.upper !== null);
  const withP = counted.filter((p) => p.p !== null);
  const last = pts.length > 0 ? pts[pts.length - 1] : null;
  const lastBand = withBand.length > 0 ? withBand[withBand.length - 1] : null;
  const lastP = withP.length > 0 ? withP[withP.length - 1] : null;
  const firstBelow = withP.find((p) => (p.p as number) <= alpha) ?? null;
  const firstCounted = counted.length > 0 ? counted[0] : null;

  // Words for the chart (desc).
  const title = `Interim monitoring of ${label}: the estimate and its anytime-valid interval as answers arrived`;
  const desc: string[] = [];
  if (!last) desc.push('No interim results yet.');
  else {
    desc.push(`Tracked from ${formatCount(pts[0].n)} to ${formatCount(last.n)} answers.`);
    if (pts.some((p) => p.provisional)) {
      const few = floor > 0 ? `fewer than ${formatCount(floor)} answers in a condition` : 'too few answers in a condition';
      desc.push(
        firstCounted
          ? `Points before ${formatCount(firstCounted.n)} answers, with ${few}, are shown grey and not read as evidence.`
          : `Every point so far has ${few}, so nothing is read as evidence yet.`,
      );
    }
    if (lastBand) {
      desc.push(
        `After ${formatCount(lastBand.n)} answers the running ${levelText} anytime-valid interval for the mean difference (a − b) runs from ${formatChartNumber(lastBand.lower)} to ${formatChartNumber(lastBand.upper)}` +
          `${(lastBand.lower as number) > 0 || (lastBand.upper as number) < 0 ? ', which excludes zero' : ', which includes zero'}.`,
      );
    } else if (firstCounted) desc.push('The anytime-valid interval is not defined yet.');
    if (lastP) desc.push(`The running anytime-valid p is ${formatChartNumber(lastP.p)}.`);
    if (firstCounted) {
      desc.push(firstBelow ? `It first reached α = ${alphaText} after ${formatCount(firstBelow.n)} answers.` : `It has not reached α = ${alphaText}.`);
    }
    if (planned !== null) desc.push(`Planned: ${formatCount(planned)} answers${last.n < planned ? ` (${formatCount(last.n)} so far)` : ''}.`);
    if (looks.length > 0) desc.push(`Recorded looks: ${looks.map((l) => `${l.number} at ${formatCount(l.n)}`).join(', ')} answers.`);
  }

  const out: string[] = [svgOpen(id, width, height, 'trajectory', title, desc.join(' '))];
  out.push(text(16, 24, 'How the difference (a − b) developed', { 'font-size': 15, 'font-weight': 600, class: 'chart-title' }));
  out.push(text(16, 44, `Line: current estimate. Band: running ${levelText} anytime-valid interval,`, { 'font-size': 12.5, fill: MUTED, class: 'chart-subtitle' }));
  out.push(text(16, 60, 'which only ever narrows and may be read after every answer.', { 'font-size': 12.5, fill: MUTED, class: 'chart-subtitle' }));

  // x scale, shared; it reaches the planned size when there is one.
  const nMin = 0;
  // The planned size is drawn in place when it lies within half as much again as the answers so far; further out
  // it would squeeze the data into a corner, so the axis ends at the data and a label points to the right.
  const lastN = Math.max(1, last ? last.n : 1, ...looks.map((l) => l.n));
  const plannedInView = planned !== null && planned <= 1.5 * lastN;
  const nMax = plannedInView ? Math.max(lastN, planned) : lastN;
  const x = (n: number): number => left + ((n - nMin) / (nMax - nMin)) * (plotRight - left);
  const xTicks = niceTicks(nMin, nMax, 5, true);
  const xStep = xTicks.length > 2 ? xTicks[2] - xTicks[1] : nMax - nMin;

  // y scale of the difference.
  const values: number[] = [0];
  for (const p of withBand) values.push(p.lower as number, p.upper as number);
  for (const p of pts) if (p.estimate !== null) values.push(p.estimate);
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
  const padD = (dHi - dLo) * 0.08;
  dLo -= padD;
  dHi += padD;
  const yD = (v: number): number => top1 + h1 - ((Math.min(dHi, Math.max(dLo, v)) - dLo) / (dHi - dLo)) * h1;
  const dTicksAll = niceTicks(dLo, dHi, 5).slice(1, -1);
  const dTicks = dTicksAll.length > 0 ? dTicksAll : [0];
  const dStep = dTicks.length > 1 ? dTicks[1] - dTicks[0] : 1;

  out.push(`<g class="panel panel-difference" font-size="13" fill="${MUTED}">`);
  // The too-early zone: from 0 to the first counted point (or everything, when none counts yet).
  if (pts.some((p) => p.provisional)) {
    const edge = firstCounted ? x(firstCounted.n) : x(last!.n);
    if (edge > left + 1) {
      out.push(`<rect class="early-zone" x="${left}" y="${top1}" width="${c(edge - left)}" height="${h1}" fill="${EARLY}"/>`);
      if (edge - left >= 60) {
        out.push(text(left + 6, top1 + 16, edge - left >= 110 ? 'too early to read' : 'too early', { 'font-size': 12, fill: MUTED, class: 'early-label' }));
      }
    }
  }
  for (const t of dTicks) {
    out.push(`<line class="grid" x1="${left}" x2="${plotRight}" y1="${c(yD(t))}" y2="${c(yD(t))}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(text(left - 8, yD(t) + 4, tickLabel(t, dStep), { 'text-anchor': 'end', class: 'tick-label' }));
  }
  // The running interval as a step band, in runs of defined bounds.
  const bandRuns = runsOf(pts, (p) => !p.provisional && p.lower !== null && p.upper !== null);
  for (const run of bandRuns) {
    if (run.length === 1) {
      const p = run[0];
      out.push(`<line class="band band-single" x1="${c(x(p.n))}" x2="${c(x(p.n))}" y1="${c(yD(p.upper as number))}" y2="${c(yD(p.lower as number))}" stroke="${BLUE}" stroke-width="4" stroke-opacity="0.45"/>`);
      continue;
    }
    const xs = run.map((p) => x(p.n));
    const upper = stepPoints(xs, run.map((p) => yD(p.upper as number)));
    const lower = stepPoints(xs, run.map((p) => yD(p.lower as number))).reverse();
    out.push(`<polygon class="band" points="${[...upper, ...lower].join(' ')}" fill="${BLUE}" fill-opacity="0.22" stroke="${BLUE}" stroke-opacity="0.6" stroke-width="1"/>`);
  }
  out.push(`<line class="zero-line" x1="${left}" x2="${plotRight}" y1="${c(yD(0))}" y2="${c(yD(0))}" stroke="${INK}" stroke-width="1.25" stroke-dasharray="5 4"/>`);
  out.push(text(plotRight - 4, yD(0) - 5, 'no difference', { 'text-anchor': 'end', 'font-size': 12, fill: INK, class: 'zero-label' }));
  // Estimate: grey before the floor, blue after (the grey run ends where the blue one starts, so the line is unbroken).
  const early = pts.filter((p) => p.provisional && p.estimate !== null);
  if (early.length > 0) {
    const run = early.map((p) => `${c(x(p.n))},${c(yD(p.estimate as number))}`);
    if (firstCounted && firstCounted.estimate !== null) run.push(`${c(x(firstCounted.n))},${c(yD(firstCounted.estimate))}`);
    out.push(lineOrDot('estimate estimate-early', run, GREY, ' stroke-dasharray="3 3"'));
  }
  for (const run of runsOf(counted, (p) => p.estimate !== null)) {
    out.push(lineOrDot('estimate', run.map((p) => `${c(x(p.n))},${c(yD(p.estimate as number))}`), INK));
  }
  if (pts.length > 0 && bandRuns.length === 0) {
    const midX = firstCounted ? (left + plotRight) / 2 : (Math.max(left, x(last!.n)) + plotRight) / 2;
    out.push(text(Math.min(midX, plotRight - 90), top1 + h1 / 2, 'not enough answers yet', { 'text-anchor': 'middle', 'font-size': 13, fill: MUTED, class: 'empty-note' }));
  }
  out.push(`<rect x="${left}" y="${top1}" width="${plotRight - left}" height="${h1}" fill="none" stroke="${AXIS}" stroke-width="1"/>`);
  out.push('</g>');

  // Planned size and recorded looks: vertical marks through both panels, labelled above the main panel.
  out.push(`<g class="marks" font-size="12" fill="${INK}">`);
  const markBottom = top2 + strip;
  if (planned !== null && plannedInView) {
    const px = x(planned);
    out.push(`<line class="planned-line" x1="${c(px)}" x2="${c(px)}" y1="${top1 - 6}" y2="${markBottom}" stroke="${INK}" stroke-width="1.25" stroke-dasharray="2 3"/>`);
    out.push(text(px - 4, top1 - 10, `planned ${formatCount(planned)}`, { 'text-anchor': 'end', class: 'planned-label' }));
  } else if (planned !== null) {
    out.push(text(plotRight, top1 - 10, `planned ${formatCount(planned)} →`, { 'text-anchor': 'end', class: 'planned-label planned-beyond' }));
  }
  for (const l of looks) {
    const lx = x(l.n);
    // A line through both panels, a small upward triangle under the main panel and its number beside it.
    const nearRight = plotRight - lx < 40;
    out.push(`<line class="look-line" x1="${c(lx)}" x2="${c(lx)}" y1="${top1}" y2="${markBottom}" stroke="${RUST}" stroke-width="1" stroke-opacity="0.8"/>`);
    out.push(`<path class="look-mark" d="M${c(lx)},${top1 + h1 + 2} L${c(lx + 5)},${top1 + h1 + 10} L${c(lx - 5)},${top1 + h1 + 10} Z" fill="${RUST}"/>`);
    out.push(
      text(nearRight ? lx - 8 : lx + 8, top1 + h1 + 11, `look ${l.number}`, { 'text-anchor': nearRight ? 'end' : 'start', 'font-size': 11, fill: RUST, class: 'look-label' }),
    );
  }
  out.push('</g>');

  // The evidence strip: running anytime-valid p on a log scale.
  const positive = withP.map((p) => p.p as number).filter((p) => p > 0);
  const smallest = Math.min(alpha, ...positive);
  const lowExp = Math.max(-12, Math.min(-2, Math.floor(Math.log10(smallest))));
  const floorP = 10 ** lowExp;
  const yP = (p: number): number => top2 + ((0 - Math.log10(Math.max(floorP, Math.min(1, p)))) / (0 - lowExp)) * strip;
  out.push(text(16, top2 - 30, 'How the evidence accumulated', { 'font-size': 14, 'font-weight': 600, fill: INK, class: 'panel-title' }));
  out.push(text(16, top2 - 12, `Running anytime-valid p (log scale); dashed line: α = ${alphaText}`, { 'font-size': 12.5, fill: MUTED, class: 'panel-subtitle' }));
  out.push(`<g class="panel panel-p" font-size="12" fill="${MUTED}">`);
  const expStep = -lowExp > 6 ? Math.ceil(-lowExp / 3) : -lowExp > 2 ? 2 : 1;
  for (let e = 0; e >= lowExp; e -= expStep) {
    out.push(`<line class="grid" x1="${left}" x2="${plotRight}" y1="${c(yP(10 ** e))}" y2="${c(yP(10 ** e))}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(text(left - 8, yP(10 ** e) + 4, pLabel(e), { 'text-anchor': 'end', class: 'tick-label' }));
  }
  out.push(`<line class="alpha-line" x1="${left}" x2="${plotRight}" y1="${c(yP(alpha))}" y2="${c(yP(alpha))}" stroke="${INK}" stroke-width="1.25" stroke-dasharray="5 4"/>`);
  for (const run of runsOf(pts, (p) => !p.provisional && p.p !== null)) {
    out.push(lineOrDot('p-line', run.map((p) => `${c(x(p.n))},${c(yP(p.p as number))}`), RUST));
  }
  if (firstBelow) {
    const fx = x(firstBelow.n);
    const fy = yP(firstBelow.p as number);
    out.push(`<circle class="first-crossing" cx="${c(fx)}" cy="${c(fy)}" r="4.5" fill="#ffffff" stroke="${INK}" stroke-width="2"/>`);
    // A running p only falls: below-left of the point (where it came from, above) and above-right (where it goes,
    // below) are empty. Below-left when there is room on both counts, else above-right.
    const belowLeft = fx - left > 170 && fy + 16 <= top2 + strip - 4;
    out.push(
      text(belowLeft ? fx - 9 : fx + 9, belowLeft ? fy + 16 : Math.max(top2 + 12, fy - 8), `reached α at ${formatCount(firstBelow.n)} answers`, {
        'text-anchor': belowLeft ? 'end' : 'start',
        'font-size': 12,
        fill: INK,
        class: 'first-crossing-label',
      }),
    );
  }
  out.push(`<rect x="${left}" y="${top2}" width="${plotRight - left}" height="${strip}" fill="none" stroke="${AXIS}" stroke-width="1"/>`);
  out.push('</g>');

  // Answers axis under the strip.
  out.push(`<g class="axis axis-n" font-size="13" fill="${MUTED}">`);
  for (const t of xTicks) {
    out.push(`<line class="tick" x1="${c(x(t))}" x2="${c(x(t))}" y1="${top2 + strip}" y2="${top2 + strip + 5}" stroke="${AXIS}" stroke-width="1"/>`);
    out.push(text(x(t), top2 + strip + 19, tickLabel(t, xStep), { 'text-anchor': 'middle', class: 'tick-label' }));
  }
  out.push(text((left + plotRight) / 2, top2 + strip + 40, 'answers received (both conditions)', { 'text-anchor': 'middle', fill: INK, class: 'axis-title' }));
  out.push('</g>');
  out.push('</svg>');
  return out.join('');
}
