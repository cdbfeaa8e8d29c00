/** The trajectory chart of the always-valid p and confidence sequence (SVG string; see common.ts). */
import { MINUS } from '../../pages/format.js';
import { AXIS, INK, MUTED, PALETTE, RULE, TrajectoryChartInput, c, checkOptionalFinite, formatChartNumber, formatCount, hashString, niceTicks, safeId, svgOpen, text, tickLabel } from './common.js';

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
