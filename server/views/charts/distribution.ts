/** The distribution chart of a comparison (SVG string; see common.ts for the conventions of every chart). */
import { AXIS, DistributionChartInput, INK, LABEL_LINE_CHARS, MUTED, PALETTE, RULE, c, checkCounts, checkOptionalFinite, escapeXml, formatChartNumber, formatCount, hashNumber, hashString, jitter, niceTicks, safeId, subsampleSorted, svgOpen, text, tickLabel, wrapLabel } from './common.js';

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


/** Characters per line of the chart's title (17 px, about 52 in the narrowest chart). */
const TITLE_LINE_CHARS = 52;

/**
 * The value axis: the whole scale, or (range "data") the answers' range widened to nice ticks and kept inside the
 * scale; `zoomed` when that range is narrower than the scale.
 */
function axisRange(input: DistributionChartInput): { min: number; max: number; zoomed: boolean } {
  const { scale } = input;
  if (input.range !== 'data') return { min: scale.min, max: scale.max, zoomed: false };
  let lo = Infinity;
  let hi = -Infinity;
  for (const g of input.groups) {
    for (const v of g.points) {
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
    for (const v of [g.whiskerLow, g.whiskerHigh, g.q1, g.q3, g.mean]) {
      if (v === null || v === undefined) continue;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  if (!(lo < hi)) return { min: scale.min, max: scale.max, zoomed: false };
  const ticks = niceTicks(lo, hi, 6, scale.integer);
  // niceTicks puts its ends at lo and hi; the step is between inner ticks.
  const step = ticks.length > 2 ? ticks[2] - ticks[1] : hi - lo;
  const min = Math.max(scale.min, Math.floor(lo / step) * step);
  const max = Math.min(scale.max, Math.ceil(hi / step) * step);
  const zoomed = min > scale.min || max < scale.max;
  return zoomed && max > min ? { min, max, zoomed } : { min: scale.min, max: scale.max, zoomed: false };
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
  const axis = axisRange(input);
  // A long item label wraps onto a second title line (then "…"); the whole label stays in <title> and the description.
  const titleLines = wrapLabel(input.measureLabel, TITLE_LINE_CHARS);
  const titleExtra = titleLines.length > 1 ? 20 : 0;
  const plotTop = D.plotTop + titleExtra + (axis.zoomed ? 34 : 0);
  const width = Math.max(D.minWidth, D.left + groups.length * D.band + D.right);
  const plotBottom = plotTop + D.plotHeight;
  const plotRight = width - D.right;
  const y = (v: number): number => {
    const clamped = Math.min(axis.max, Math.max(axis.min, v));
    return plotBottom - D.pad - ((clamped - axis.min) / (axis.max - axis.min)) * (D.plotHeight - 2 * D.pad);
  };
  const ticks = niceTicks(axis.min, axis.max, 6, scale.integer);
  const tickStep = ticks.length > 2 ? ticks[2] - ticks[1] : axis.max - axis.min;
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
  if (axis.zoomed) descParts.push(`Zoomed to the answers: the axis runs from ${formatChartNumber(axis.min)} to ${formatChartNumber(axis.max)}, not over the whole scale.`);
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
  titleLines.forEach((line, k) => out.push(text(16, 26 + 20 * k, line, { class: k === 0 ? 'chart-title' : 'chart-title chart-title-more', 'font-size': 17, 'font-weight': 600 })));
  out.push(
    text(16, 48 + titleExtra, `Scale ${scaleText}. Each dot is one answer.`, { class: 'chart-subtitle', 'font-size': 13, fill: MUTED }),
  );
  if (axis.zoomed) {
    const zoomLines = [
      `Zoomed to the answers: the axis runs from ${formatChartNumber(axis.min)} to ${formatChartNumber(axis.max)}.`,
      axis.min > scale.min ? `It does not start at the scale's minimum (${formatChartNumber(scale.min)}).` : `It stops below the scale's maximum (${formatChartNumber(scale.max)}).`,
    ];
    zoomLines.forEach((line, k) => out.push(text(16, 66 + titleExtra + 17 * k, line, { class: 'zoom-note', 'font-size': 13, 'font-weight': 600, fill: INK })));
  }

  // Axis and grid.
  out.push(`<g class="axis axis-value" data-min="${escapeXml(String(scale.min))}" data-max="${escapeXml(String(scale.max))}" font-size="14" fill="${MUTED}">`);
  for (const t of ticks) {
    const ty = y(t);
    out.push(`<line class="grid" x1="${D.left}" x2="${c(plotRight)}" y1="${c(ty)}" y2="${c(ty)}" stroke="${RULE}" stroke-width="1"/>`);
    out.push(`<line class="tick" x1="${D.left - 6}" x2="${D.left}" y1="${c(ty)}" y2="${c(ty)}" stroke="${AXIS}" stroke-width="1"/>`);
    out.push(text(D.left - 10, ty + 4.5, tickLabel(t, tickStep), { 'text-anchor': 'end', class: 'tick-label', 'data-value': String(t) }));
  }
  out.push(`<line class="axis-line" x1="${D.left}" x2="${D.left}" y1="${c(y(axis.max))}" y2="${c(y(axis.min))}" stroke="${AXIS}" stroke-width="1"/>`);
  if (axis.zoomed && axis.min > scale.min) {
    // The usual axis-break mark: two short slanted strokes across the axis at its bottom.
    const by = plotBottom - 2;
    out.push(
      `<path class="axis-break" d="M${D.left - 7} ${c(by + 3)}L${D.left + 7} ${c(by - 3)}M${D.left - 7} ${c(by + 8)}L${D.left + 7} ${c(by + 2)}" stroke="${INK}" stroke-width="2" fill="none"/>`,
    );
  }
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
      const step = (D.plotHeight - 2 * D.pad) / (axis.max - axis.min);
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
      out.push(text(x0 + D.band / 2, plotTop + D.plotHeight / 2, 'no answers yet', { 'text-anchor': 'middle', 'font-size': 13, fill: MUTED, class: 'empty-note' }));
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
