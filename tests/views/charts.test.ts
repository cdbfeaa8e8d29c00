import { describe, expect, it } from 'vitest';
import { distributionGroupFromSample, escapeXml, formatChartNumber, jitter, niceTicks, subsampleSorted, whiskers, type DistributionChartInput, type DistributionGroup, type TrajectoryPoint } from '../../server/views/charts/common.js';
import { renderTrajectoryChart } from '../../server/views/charts/trajectory.js';
import { renderDistributionChart } from '../../server/views/charts/distribution.js';
import { formatNumber } from '../../server/pages/format.js';
import type { Sample } from '../../stats/sample.js';
import type { GroupSummary } from '../../stats/types.js';

// ---------------------------------------------------------------------------------------------------------
// Helpers: a tiny well-formedness check and extractors (the SVG is a string; no DOM in node)
// ---------------------------------------------------------------------------------------------------------

/** Throws unless every element is closed in order (self-closing allowed); ignores text. */
function assertWellFormed(svg: string): void {
  const stack: string[] = [];
  const re = /<(\/?)([A-Za-z][\w:-]*)((?:\s+[\w:-]+="[^"<]*")*)\s*(\/?)>/g;
  let consumed = 0;
  let m: RegExpExecArray | null;
  while ((m = re.exec(svg)) !== null) {
    const between = svg.slice(consumed, m.index);
    expect(between, `stray markup before ${m[0]}`).not.toMatch(/[<>]/);
    consumed = m.index + m[0].length;
    const [, close, name, , self] = m;
    if (close) expect(stack.pop(), `closing </${name}>`).toBe(name);
    else if (!self) stack.push(name);
  }
  expect(svg.slice(consumed)).toBe('');
  expect(stack).toEqual([]);
}

/** The markup of each <g class="group" …> … </g> (groups contain nested <g>, so cut at the next group). */
function groupChunks(svg: string): string[] {
  const parts = svg.split('<g class="group" ');
  parts.shift();
  return parts.map((p) => p.split('<g class="legend"')[0]);
}

function pointsIn(chunk: string): Array<[number, number]> {
  const pointsBlock = chunk.match(/<g class="points"[^>]*>(.*?)<\/g>/);
  if (!pointsBlock) return [];
  return [...pointsBlock[1].matchAll(/<circle cx="([-\d.]+)" cy="([-\d.]+)"/g)].map((x) => [Number(x[1]), Number(x[2])]);
}

const count = (s: string, needle: string): number => s.split(needle).length - 1;

/** Type-7 quartiles and mean of sorted values (for building inputs; not under test). */
function summaryOf(sorted: readonly number[]): Pick<DistributionGroup, 'n' | 'q1' | 'median' | 'q3' | 'mean'> {
  const q = (p: number): number => {
    const h = (sorted.length - 1) * p;
    const lo = Math.floor(h);
    return sorted[lo] + (h - lo) * (sorted[Math.min(lo + 1, sorted.length - 1)] - sorted[lo]);
  };
  return { n: sorted.length, q1: q(0.25), median: q(0.5), q3: q(0.75), mean: sorted.reduce((a, b) => a + b, 0) / sorted.length };
}

function groupFromValues(label: string, values: readonly number[]): DistributionGroup {
  const sorted = Object.freeze([...values].sort((a, b) => a - b));
  const s = summaryOf(sorted);
  const w = whiskers(sorted, s.q1 as number, s.q3 as number);
  return { label, ...s, whiskerLow: w?.low ?? null, whiskerHigh: w?.high ?? null, points: sorted };
}

const SCALE_0_10 = Object.freeze({ min: 0, max: 10, integer: true });

function twoGroupInput(): DistributionChartInput {
  return {
    measureLabel: 'Satisfaction',
    scale: SCALE_0_10,
    groups: [groupFromValues('bill-first', [3, 5, 5, 6, 7, 7, 7, 8, 9, 10]), groupFromValues('service-first', [1, 4, 6, 6, 7, 8, 8, 8, 9, 9, 10, 10])],
  };
}

// ---------------------------------------------------------------------------------------------------------
// Helpers under test
// ---------------------------------------------------------------------------------------------------------

describe('subsampleSorted', () => {
  it('returns every answer when there are at most max', () => {
    const x = Object.freeze([1, 2, 2, 5]);
    expect(Array.from(subsampleSorted(x, 10))).toEqual([1, 2, 2, 5]);
    expect(Array.from(subsampleSorted(x, 4))).toEqual([1, 2, 2, 5]);
  });

  it('keeps max evenly spaced order statistics including the minimum and the maximum', () => {
    const x = Object.freeze(Array.from({ length: 10_001 }, (_, i) => i / 10)); // ranks 0 … 10,000
    const s = subsampleSorted(x, 101);
    expect(s.length).toBe(101);
    // rank round(i · 10000 / 100) = 100 i: exact by construction (hand computation)
    for (let i = 0; i <= 100; i++) expect(s[i]).toBe(x[100 * i]);
  });

  it('walks per-value counts without expanding them and agrees with the expanded answers', () => {
    const values = Object.freeze([0, 3, 7, 10]);
    const counts = Object.freeze([400, 1, 2500, 99]);
    const expanded: number[] = [];
    values.forEach((v, i) => {
      for (let k = 0; k < counts[i]; k++) expanded.push(v);
    });
    for (const max of [1, 2, 7, 100, 2000, 3000, 5000]) {
      expect(Array.from(subsampleSorted(values, max, counts)), `max ${max}`).toEqual(Array.from(subsampleSorted(expanded, max)));
    }
    const s = subsampleSorted(values, 2000, counts);
    expect(s.length).toBe(2000);
    expect(s[0]).toBe(0);
    expect(s[1999]).toBe(10);
  });

  it('rejects unsorted or non-finite values and bad counts, naming the index', () => {
    expect(() => subsampleSorted(Object.freeze([1, 3, 2]), 10)).toThrow(/values\[2\]/);
    expect(() => subsampleSorted(Object.freeze([1, Number.NaN]), 10)).toThrow(/values\[1\] is NaN/);
    expect(() => subsampleSorted(Object.freeze([1, 2]), 10, Object.freeze([1, 0.5]))).toThrow(/counts\[1\]/);
    expect(() => subsampleSorted(Object.freeze([1, 2]), 0)).toThrow(RangeError);
  });
});

describe('whiskers', () => {
  it('reach the most extreme answers within 1.5·IQR of the box', () => {
    // Hand computation: type-7 quartiles of 1…9, 30 are q1 = 3.25, q3 = 7.75; IQR 4.5; fences −3.5 and 14.5;
    // so the whiskers end at 1 and 9, and 30 lies beyond.
    const x = Object.freeze([1, 2, 3, 4, 5, 6, 7, 8, 9, 30]);
    expect(whiskers(x, 3.25, 7.75)).toEqual({ low: 1, high: 9 });
    // A value exactly on the fence counts as inside (Tukey 1977: "within").
    expect(whiskers(Object.freeze([-3.5, 3.25, 7.75, 14.5]), 3.25, 7.75)).toEqual({ low: -3.5, high: 14.5 });
  });

  it('never end inside the box and are null for no answers', () => {
    // Hand computation: n = 4, type-7 q1 = −100 + 0.75·105 = −21.25, q3 = 6.25; fence −62.5 excludes −100; the
    // first answer inside (5) lies above q1, so the lower whisker stays at q1.
    expect(whiskers(Object.freeze([-100, 5, 6, 7]), -21.25, 6.25)).toEqual({ low: -21.25, high: 7 });
    expect(whiskers(Object.freeze([]), 0, 0)).toBeNull();
  });
});

describe('jitter', () => {
  it('is deterministic, lies in [−1, 1) and spreads evenly', () => {
    let sum = 0;
    let below = 0;
    for (let i = 0; i < 20_000; i++) {
      const j = jitter('seed', i);
      expect(j).toBe(jitter('seed', i));
      expect(j).toBeGreaterThanOrEqual(-1);
      expect(j).toBeLessThan(1);
      sum += j;
      if (j < 0) below++;
    }
    // Uniform on [−1, 1): mean 0 with SD 1/√3/√20000 ≈ 0.004; half below zero ± 0.0035 (1 SD); bounds are ~5 SD.
    expect(Math.abs(sum / 20_000)).toBeLessThan(0.02);
    expect(Math.abs(below / 20_000 - 0.5)).toBeLessThan(0.02);
    expect(jitter('seed', 1)).not.toBe(jitter('other seed', 1));
  });
});

describe('niceTicks', () => {
  it('puts a tick on every value of a short whole-number scale', () => {
    expect(niceTicks(1, 7, 6, true)).toEqual([1, 2, 3, 4, 5, 6, 7]);
  });
  it('always starts at min and ends at max', () => {
    expect(niceTicks(0, 200)).toEqual([0, 50, 100, 150, 200]);
    const t = niceTicks(3, 97);
    expect(t[0]).toBe(3);
    expect(t[t.length - 1]).toBe(97);
    expect(t).toEqual([...t].sort((a, b) => a - b));
  });
});

describe('formatChartNumber', () => {
  it('agrees with the page formatter (format.js) everywhere', () => {
    const xs = [0, -0, 1, -1, 7, 1250, 1234567, 6.8, 6.8333, -0.58, 0.0456, 0.00012, 0.00009, 123.456, 99.95, 9.996, -1e-7, 2.5e6, 1e6, 0.1 + 0.2];
    for (const x of xs) expect(formatChartNumber(x), String(x)).toBe(formatNumber(x));
    expect(formatChartNumber(null)).toBe(formatNumber(null));
  });
});

describe('escapeXml', () => {
  it('escapes markup characters and drops characters XML forbids', () => {
    expect(escapeXml(`<a href="x">'&'</a>`)).toBe('&lt;a href=&quot;x&quot;&gt;&apos;&amp;&apos;&lt;/a&gt;');
    expect(escapeXml('a\u0000b\u0007c')).toBe('abc');
  });
});

// ---------------------------------------------------------------------------------------------------------
// Distribution chart
// ---------------------------------------------------------------------------------------------------------

describe('renderDistributionChart', () => {
  it('draws one box, one median, one mean mark and every answer per group', () => {
    const input = twoGroupInput();
    const svg = renderDistributionChart(input);
    assertWellFormed(svg);
    expect(svg.startsWith('<svg')).toBe(true);
    expect(svg).toContain('role="img"');
    expect(count(svg, '<title')).toBe(1);
    expect(count(svg, '<desc')).toBe(1);
    const chunks = groupChunks(svg);
    expect(chunks.length).toBe(2);
    chunks.forEach((chunk, i) => {
      expect(count(chunk, '<rect class="box"'), `group ${i}`).toBe(1);
      expect(count(chunk, 'class="median-mark"')).toBe(1);
      expect(count(chunk, 'class="mean-mark"')).toBe(1);
      expect(count(chunk, 'class="whisker whisker-')).toBe(2);
      expect(pointsIn(chunk).length).toBe(input.groups[i].n);
      expect(chunk).toContain(`data-points="${input.groups[i].n}"`);
    });
    // The legend explains the mean mark apart from the median.
    expect(svg).toContain('class="legend-mean"');
    expect(svg).toMatch(/>mean<\/text>/);
    expect(svg).toMatch(/>median<\/text>/);
    // Mean and median are different marks (a diamond path and a line).
    expect(svg).toMatch(/<path class="mean-mark" d="M[^"]+Z"/);
    expect(svg).toMatch(/<line class="median-mark"/);
    expect(svg).not.toMatch(/NaN|Infinity|undefined/);
  });

  it('puts the mean and the median at their own heights', () => {
    const g = groupFromValues('skewed', [0, 0, 0, 1, 1, 2, 10, 10]);
    const svg = renderDistributionChart({ measureLabel: 'x', scale: SCALE_0_10, groups: [g] });
    const medianY = Number(svg.match(/class="median-mark" x1="[^"]+" x2="[^"]+" y1="([^"]+)"/)![1]);
    const meanPath = svg.match(/class="mean-mark" d="M[^ ]+ ([^L]+)L[^ ]+ ([^L]+)L/)!;
    const meanY = Number(meanPath[2]);
    // y = bottom − pad − v/10 · (height − 2·pad) = 340 − 8 − v · 25.4 (layout constants: top 70, height 270, pad 8)
    expect(medianY).toBeCloseTo(332 - 25.4 * (g.median as number), 1); // 2 decimals written
    expect(meanY).toBeCloseTo(332 - 25.4 * (g.mean as number), 1);
    expect(meanY).not.toBeCloseTo(medianY, 0);
  });

  it('uses the scale limits as the axis range, with ticks at both ends', () => {
    const svg = renderDistributionChart(twoGroupInput());
    expect(svg).toContain('class="axis axis-value" data-min="0" data-max="10"');
    const tickValues = [...svg.matchAll(/class="tick-label" data-value="([^"]+)"/g)].map((m) => Number(m[1]));
    expect(tickValues).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10]);
    const axis = svg.match(/class="axis-line" x1="[^"]+" x2="[^"]+" y1="([^"]+)" y2="([^"]+)"/)!;
    const gridYs = [...svg.matchAll(/class="grid" x1="[^"]+" x2="[^"]+" y1="([^"]+)"/g)].map((m) => Number(m[1]));
    expect(Number(axis[1])).toBe(Math.min(...gridYs)); // the axis runs from the max tick …
    expect(Number(axis[2])).toBe(Math.max(...gridYs)); // … to the min tick
    // A continuous 0–200 item: ticks at both limits even though no answer reaches them.
    const svg2 = renderDistributionChart({ measureLabel: 'price', scale: { min: 0, max: 200, integer: false }, groups: [groupFromValues('a', [40.5, 60, 61.25, 80])] });
    const t2 = [...svg2.matchAll(/class="tick-label" data-value="([^"]+)"/g)].map((m) => Number(m[1]));
    expect(t2[0]).toBe(0);
    expect(t2[t2.length - 1]).toBe(200);
  });

  it('draws an evenly spaced subsample above 2,000 answers and says so', () => {
    const big = Object.freeze(Array.from({ length: 5000 }, (_, i) => (i * 200) / 4999));
    const g = groupFromValues('bill-first', big);
    const small = groupFromValues('service-first', [10, 20, 30]);
    const svg = renderDistributionChart({ measureLabel: 'Fair price', scale: { min: 0, max: 200, integer: false }, groups: [g, small] });
    assertWellFormed(svg);
    const [c1, c2] = groupChunks(svg);
    expect(pointsIn(c1).length).toBe(2000);
    expect(c1).toContain('data-points="2000" data-total="5000"');
    expect(c1).toContain('showing 2,000 of 5,000 answers');
    expect(pointsIn(c2).length).toBe(3);
    expect(c2).not.toContain('showing');
    expect(svg).toMatch(/<desc[^>]*>[^<]*showing 2,000 of 5,000 answers/);
    // A smaller limit is honoured too.
    const svg3 = renderDistributionChart({ measureLabel: 'Fair price', scale: { min: 0, max: 200, integer: false }, groups: [g], maxPoints: 300 });
    expect(pointsIn(groupChunks(svg3)[0]).length).toBe(300);
    expect(svg3).toContain('showing 300 of 5,000 answers');
  });

  it('says "showing m of N" when the caller already passed a subsample (totalN > points)', () => {
    const g = { ...groupFromValues('a', [1, 2, 3, 4]), n: 9000, totalN: 9000 };
    const svg = renderDistributionChart({ measureLabel: 'x', scale: SCALE_0_10, groups: [g] });
    expect(svg).toContain('showing 4 of 9,000 answers');
  });

  it('draws integer items from per-value counts', () => {
    const values = Object.freeze([0, 5, 6, 7, 10]);
    const counts = Object.freeze([2, 14, 20, 18, 1]);
    const sample: Sample = { values: Float64Array.from(values), counts: Float64Array.from(counts), n: 55 };
    const expanded: number[] = [];
    values.forEach((v, i) => {
      for (let k = 0; k < counts[i]; k++) expanded.push(v);
    });
    const s = summaryOf(expanded);
    const summary = { ...s, sd: null, iqr: null, min: 0, max: 10, skewness: null, excessKurtosis: null, mad: null, shapiroWilk: null } as GroupSummary;
    const g = distributionGroupFromSample('bill-first', sample, summary);
    expect(g.points.length).toBe(55);
    expect(g.totalN).toBe(55);
    // Hand computation: type-7 q1 = 5 and q3 = 7 on the 55 answers (ranks 13.5 and 40.5), fences 2 and 10:
    // whiskers 5 and 10, the two answers of 0 lie beyond.
    expect([g.q1, g.q3, g.whiskerLow, g.whiskerHigh]).toEqual([5, 7, 5, 10]);
    const svg = renderDistributionChart({ measureLabel: 'Satisfaction', scale: SCALE_0_10, groups: [g] });
    const pts = pointsIn(groupChunks(svg)[0]);
    expect(pts.length).toBe(55);
    // Same input through points + counts directly: the identical picture.
    const direct = renderDistributionChart({ measureLabel: 'Satisfaction', scale: SCALE_0_10, groups: [{ ...g, points: values, counts, totalN: undefined }] });
    expect(pointsIn(groupChunks(direct)[0])).toEqual(pts);
    // Wider spread sideways where answers are common (value 6: 20 answers) than where they are rare (value 0: 2).
    const spread = (rowY: number): number => {
      const xs = pts.filter(([, y]) => Math.abs(y - rowY) < 6).map(([x]) => x);
      return Math.max(...xs) - Math.min(...xs);
    };
    expect(spread(332 - 25.4 * 6)).toBeGreaterThan(spread(332 - 25.4 * 0));
  });

  it('is deterministic, and a new answer does not move the answers already drawn', () => {
    const input = twoGroupInput();
    expect(renderDistributionChart(input)).toBe(renderDistributionChart(input));
    const values = Object.freeze([1, 4, 7, 9]);
    const before = renderDistributionChart({ measureLabel: 'S', scale: SCALE_0_10, groups: [{ ...groupFromValues('a', [7]), points: values, counts: Object.freeze([3, 5, 40, 6]) }] });
    const after = renderDistributionChart({ measureLabel: 'S', scale: SCALE_0_10, groups: [{ ...groupFromValues('a', [7]), points: values, counts: Object.freeze([3, 6, 40, 6]) }] });
    const p0 = new Set(pointsIn(groupChunks(before)[0]).map((p) => p.join()));
    const p1 = pointsIn(groupChunks(after)[0]).map((p) => p.join());
    expect(p1.length).toBe(p0.size + 1);
    // Every point of values 1, 7 and 9 is exactly where it was (value 4's cloud widens a little).
    const row = (y: string): boolean => Math.abs(Number(y.split(',')[1]) - (332 - 25.4 * 4)) > 6;
    for (const p of [...p0].filter(row)) expect(p1).toContain(p);
  });

  it('escapes every label and uses no style attribute or element', () => {
    const evil = `<script>alert("x")</script> & 'quotes'`;
    const svg = renderDistributionChart({ ...twoGroupInput(), measureLabel: evil, groups: [groupFromValues(evil, [1, 2, 3])] });
    assertWellFormed(svg);
    expect(svg).not.toContain('<script');
    expect(svg).toContain('&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &apos;quotes&apos;');
    expect(svg).not.toMatch(/\sstyle=/);
    expect(svg).not.toMatch(/<style/);
    expect(svg).not.toMatch(/\son[a-z]+=/i);
    // The id prefix stays a plain token whatever the label.
    expect(svg).toMatch(/aria-labelledby="[A-Za-z0-9_-]+-title"/);
  });

  it('summarises the groups in the text alternative', () => {
    const svg = renderDistributionChart(twoGroupInput());
    const desc = svg.match(/<desc[^>]*>([^<]*)<\/desc>/)![1];
    expect(desc).toContain('bill-first: 10 answers, median 7, mean 6.70');
    expect(desc).toContain('service-first: 12 answers, median 8, mean 7.17'); // 86 / 12 = 7.1667 (hand computation)
    expect(desc).toContain('on a scale from 0 to 10, whole numbers');
  });

  it('handles a group with no answers', () => {
    const empty: DistributionGroup = { label: 'late', n: 0, q1: null, median: null, q3: null, mean: null, whiskerLow: null, whiskerHigh: null, points: [] };
    const svg = renderDistributionChart({ ...twoGroupInput(), groups: [twoGroupInput().groups[0], empty] });
    assertWellFormed(svg);
    const chunks = groupChunks(svg);
    expect(count(chunks[1], 'class="box"')).toBe(0);
    expect(chunks[1]).toContain('no answers yet');
    expect(svg).toContain('late: no answers yet.');
  });

  it('rejects a bad scale and bad numbers with a RangeError', () => {
    expect(() => renderDistributionChart({ ...twoGroupInput(), scale: { min: 5, max: 5, integer: true } })).toThrow(RangeError);
    expect(() => renderDistributionChart({ ...twoGroupInput(), groups: [{ ...groupFromValues('a', [1, 2]), mean: Number.NaN }] })).toThrow(/groups\[0\]\.mean/);
    expect(() => renderDistributionChart({ ...twoGroupInput(), groups: [{ ...groupFromValues('a', [1, 2]), points: Object.freeze([2, 1]) }] })).toThrow(/\[1\]/);
  });
});

// ---------------------------------------------------------------------------------------------------------
// Trajectory chart
// ---------------------------------------------------------------------------------------------------------

function trajectory(): TrajectoryPoint[] {
  const pts: TrajectoryPoint[] = [];
  for (let n = 10; n <= 400; n += 10) {
    const defined = n >= 40;
    const est = -0.6 + 2 / Math.sqrt(n);
    const half = 8 / Math.sqrt(n);
    pts.push({ n, p: defined ? Math.min(1, 4 * Math.exp(-n / 80)) : null, lower: defined ? est - half : null, upper: defined ? est + half : null, estimate: defined ? est : null });
  }
  return pts;
}

describe('renderTrajectoryChart', () => {
  it('skips null bounds early on and draws the step band, the zero line, the p line and the alpha line', () => {
    const points = Object.freeze(trajectory());
    const svg = renderTrajectoryChart({ alpha: 0.05, points, measureLabel: 'Satisfaction' });
    assertWellFormed(svg);
    expect(svg).toContain('role="img"');
    expect(count(svg, '<polygon class="band"')).toBe(1);
    const band = svg.match(/<polygon class="band" points="([^"]+)"/)![1].split(' ');
    // A step outline: k defined points give 2k − 1 corners on each edge.
    const k = points.filter((p) => p.lower !== null).length;
    expect(band.length).toBe(2 * (2 * k - 1));
    // Every step is horizontal then vertical: corner 2i+1 has the x of corner 2i+2 and the y of corner 2i.
    const xy = band.slice(0, 2 * k - 1).map((s) => s.split(',').map(Number));
    for (let i = 0; i + 2 < xy.length; i += 2) {
      expect(xy[i + 1][1]).toBe(xy[i][1]);
      expect(xy[i + 1][0]).toBe(xy[i + 2][0]);
    }
    // The running interval never widens: the upper edge never rises on screen… (y grows downwards)
    for (let i = 2; i < xy.length; i += 2) expect(xy[i][1]).toBeGreaterThanOrEqual(xy[i - 2][1]);
    expect(svg).toContain('class="zero-line"');
    expect(svg).toContain('class="alpha-line"');
    expect(count(svg, '<polyline class="p-line"')).toBe(1);
    expect(count(svg, '<polyline class="estimate"')).toBe(1);
    expect(svg).not.toMatch(/NaN|Infinity|undefined/);
    expect(svg).not.toMatch(/\sstyle=|<style/);
    const desc = svg.match(/<desc[^>]*>([^<]*)<\/desc>/)![1];
    // 4·exp(−n/80) ≤ 0.05 first at n = 360 (hand computation: 80·ln 80 = 350.6)
    expect(desc).toContain('It first reached α = 0.05 after 360 answers');
    expect(desc).toContain('After 400 answers the running 95% anytime-valid interval');
    expect(svg).toContain('How the evidence accumulated');
    expect(svg).not.toMatch(/always-valid/i);
    expect(svg).toContain('class="first-crossing"');
  });

  it('before the floor of answers per condition: grey estimate, no band, no p and no crossing, however small p is', () => {
    // Early points (fewer than 30 per condition) with p = 1e-30, as a tiny early sample can give; later ones ordinary.
    const pts: TrajectoryPoint[] = [];
    for (let n = 4; n <= 200; n += 4) {
      const half = n / 2;
      const early = half < 30;
      pts.push({ n, nA: half, nB: half, p: early ? 1e-30 : 0.4, lower: early ? -3.1 : -1, upper: early ? -3 : 1, estimate: early ? -3.05 : 0.1 });
    }
    const svg = renderTrajectoryChart({ alpha: 0.05, points: Object.freeze(pts), floorPerCondition: 30 });
    assertWellFormed(svg);
    expect(svg).not.toContain('class="first-crossing"');
    expect(svg).toContain('class="early-zone"');
    expect(count(svg, 'class="estimate estimate-early"')).toBe(1);
    const desc = svg.match(/<desc[^>]*>([^<]*)<\/desc>/)![1];
    expect(desc).toContain('Points before 60 answers, with fewer than 30 answers in a condition, are shown grey');
    expect(desc).toContain('It has not reached α = 0.05.');
    // The band and the p line start at the first counted point (n = 60), which is the right edge of the early zone.
    const zone = svg.match(/<rect class="early-zone" x="([\d.]+)" y="[\d.]+" width="([\d.]+)"/)!;
    const zoneEnd = Number(zone[1]) + Number(zone[2]);
    const bandStart = Number(svg.match(/<polygon class="band" points="([\d.]+),/)![1]);
    const pStart = Number(svg.match(/<polyline class="p-line" points="([\d.]+),/)![1]);
    expect(bandStart).toBeCloseTo(zoneEnd, 1);
    expect(pStart).toBeCloseTo(zoneEnd, 1);
    // The same points with provisional given explicitly (and no answers per condition) draw the same picture.
    const flagged = pts.map(({ nA, nB, ...p }) => ({ ...p, provisional: (nA as number) < 30 && (nB as number) < 30 }));
    expect(renderTrajectoryChart({ alpha: 0.05, points: Object.freeze(flagged), floorPerCondition: 30 })).toBe(svg);
  });

  it('marks the planned size and the recorded looks; the axis reaches a near planned size', () => {
    const svg = renderTrajectoryChart({
      alpha: 0.05,
      points: Object.freeze(trajectory()),
      plannedTotal: 500,
      looks: Object.freeze([{ number: 1, n: 200 }, { number: 2, n: 400 }]),
    });
    assertWellFormed(svg);
    expect(svg).toContain('>planned 500<');
    expect(count(svg, 'class="look-mark"')).toBe(2);
    expect(svg).toContain('>look 2<');
    const ticks = [...svg.matchAll(/class="axis axis-n"[\s\S]*?<\/g>/g)][0][0];
    const labels = [...ticks.matchAll(/class="tick-label">([^<]+)</g)].map((m) => Number(m[1].replace(/[\s,\u202f]/g, '')));
    expect(Math.max(...labels)).toBe(500);
    const desc = svg.match(/<desc[^>]*>([^<]*)<\/desc>/)![1];
    expect(desc).toContain('Planned: 500 answers (400 so far). Recorded looks: 1 at 200, 2 at 400 answers.');
    // Far beyond the data (over 1.5 × the answers so far), the axis ends at the data and a label points right.
    const far = renderTrajectoryChart({ alpha: 0.05, points: Object.freeze(trajectory()), plannedTotal: 5000 });
    expect(far).not.toContain('class="planned-line"');
    expect(far).toContain('planned 5,000 →');
  });

  it('breaks the band where bounds are missing in the middle', () => {
    const pts = trajectory();
    pts[10] = { ...pts[10], lower: null, upper: null };
    const svg = renderTrajectoryChart({ alpha: 0.05, points: Object.freeze(pts) });
    expect(count(svg, '<polygon class="band"')).toBe(2);
  });

  it('copes with no defined bounds and with no points at all', () => {
    const early = Object.freeze([
      { n: 2, p: null, lower: null, upper: null },
      { n: 4, p: null, lower: null, upper: null },
    ]);
    const svg = renderTrajectoryChart({ alpha: 0.05, points: early });
    assertWellFormed(svg);
    expect(svg).toContain('not enough answers yet');
    expect(svg).not.toMatch(/NaN|Infinity/);
    const none = renderTrajectoryChart({ alpha: 0.05, points: Object.freeze([]) });
    assertWellFormed(none);
    expect(none).toContain('No interim results yet.');
    expect(none).not.toMatch(/NaN|Infinity/);
  });

  it('clips the difference axis to the given limits, escapes the label and is deterministic', () => {
    const pts = trajectory();
    pts[3] = { ...pts[3], lower: -500, upper: 500 };
    const input = { alpha: 0.05, points: Object.freeze(pts), differenceLimits: { lower: -10, upper: 10 }, measureLabel: '<b>"x"</b>' };
    const svg = renderTrajectoryChart(input);
    expect(svg).toBe(renderTrajectoryChart(input));
    expect(svg).not.toContain('<b>');
    expect(svg).toContain('&lt;b&gt;&quot;x&quot;&lt;/b&gt;');
    const ticks = [...svg.matchAll(/class="panel panel-difference"[\s\S]*?<\/g>/g)][0][0];
    const labels = [...ticks.matchAll(/class="tick-label">([^<]+)</g)].map((m) => Number(m[1].replace('\u2212', '-')));
    expect(Math.max(...labels.map(Math.abs))).toBeLessThanOrEqual(10);
  });

  it('rejects bad input', () => {
    expect(() => renderTrajectoryChart({ alpha: 0, points: [] })).toThrow(RangeError);
    expect(() => renderTrajectoryChart({ alpha: 0.05, points: [{ n: 1, p: 2, lower: null, upper: null }] })).toThrow(/points\[0\]\.p/);
    expect(() => renderTrajectoryChart({ alpha: 0.05, points: [{ n: 1, p: 0.5, lower: 2, upper: 1 }] })).toThrow(/points\[0\]/);
    expect(() => renderTrajectoryChart({ alpha: 0.05, points: [{ n: 1, p: 0.5, lower: Number.NaN, upper: 1 }] })).toThrow(/lower/);
  });
});

describe('renderDistributionChart: the data-range view and long titles', () => {
  // An optional "minutes on the page" item on 0–120 with every answer under 20 (invented).
  function minutesInput(range?: 'scale' | 'data'): DistributionChartInput {
    const group = (label: string, pts: number[]): DistributionGroup => ({
      label,
      n: pts.length,
      q1: pts[Math.floor(pts.length / 4)],
      median: pts[Math.floor(pts.length / 2)],
      q3: pts[Math.floor((3 * pts.length) / 4)],
      mean: pts.reduce((s, v) => s + v, 0) / pts.length,
      whiskerLow: pts[0],
      whiskerHigh: pts[pts.length - 1],
      points: Float64Array.from(pts),
    });
    return {
      measureLabel: 'Minutes spent on the page',
      scale: { min: 0, max: 120, integer: false },
      groups: [group('Plain', [2.5, 3, 4, 5.5, 6, 7, 8, 9.5, 12]), group('Detailed', [3.5, 4, 6, 7.5, 8, 10, 11, 14, 18.5])],
      ...(range ? { range } : {}),
    };
  }
  const ticksOf = (svg: string) => [...svg.matchAll(/class="tick-label" data-value="([^"]+)"/g)].map((m) => Number(m[1]));

  it('range "data" zooms the axis to the answers, inside the scale, and says the axis does not start at the minimum', () => {
    const full = renderDistributionChart(minutesInput());
    const zoomed = renderDistributionChart(minutesInput('data'));
    assertWellFormed(zoomed);
    expect(ticksOf(full)[0]).toBe(0);
    expect(ticksOf(full).at(-1)).toBe(120);
    const t = ticksOf(zoomed);
    expect(t[0]).toBeLessThanOrEqual(2.5);
    expect(t[0]).toBeGreaterThanOrEqual(0);
    expect(t.at(-1)).toBeGreaterThanOrEqual(18.5);
    expect(t.at(-1)).toBeLessThanOrEqual(25);
    expect(zoomed).toContain(`Zoomed to the answers: the axis runs from ${t[0]} to ${t.at(-1)}.`);
    expect(zoomed).toContain(t[0] > 0 ? 'It does not start at the scale&apos;s minimum (0).' : 'It stops below the scale&apos;s maximum (120).');
    expect(count(zoomed, 'class="axis-break"')).toBe(t[0] > 0 ? 1 : 0);
    // Answers well above the scale's minimum: the axis starts above it, with the break mark.
    const high = minutesInput('data');
    const shifted: DistributionChartInput = { ...high, scale: { min: -100, max: 120, integer: false } };
    const s2 = renderDistributionChart(shifted);
    expect(ticksOf(s2)[0]).toBeGreaterThan(-100);
    expect(s2).toContain('It does not start at the scale&apos;s minimum (−100).');
    expect(count(s2, 'class="axis-break"')).toBe(1);
    expect(zoomed).toMatch(/<desc[^>]*>[^<]*Zoomed to the answers: the axis runs from [^<]+, not over the whole scale\./);
    expect(full).not.toContain('Zoomed');
    expect(count(full, 'class="axis-break"')).toBe(0);
    // Every point lies inside the plot in both views (y within the plot area).
    const ys = (svg: string) =>
      [...svg.matchAll(/<g class="points"[^>]*>(.*?)<\/g>/g)].flatMap((g) => [...g[1].matchAll(/cy="([^"]+)"/g)].map((m) => Number(m[1])));
    const spread = (v: number[]) => Math.max(...v) - Math.min(...v);
    expect(spread(ys(zoomed))).toBeGreaterThan(4 * spread(ys(full)));
  });

  it('range "data" on answers that fill the scale changes nothing', () => {
    const input: DistributionChartInput = { ...minutesInput(), scale: { min: 2.5, max: 18.5, integer: false } };
    expect(renderDistributionChart({ ...input, range: 'data' })).toBe(renderDistributionChart(input));
  });

  it('a long item label wraps onto a second title line; the whole label stays in the title element', () => {
    const label = 'How acceptable is the new tariff to your household, all things considered, given what you pay today? (0–100)';
    const svg = renderDistributionChart({ ...twoGroupInput(), measureLabel: label });
    assertWellFormed(svg);
    const lines = [...svg.matchAll(/<text[^>]*class="chart-title[^"]*"[^>]*>([^<]*)<\/text>/g)].map((m) => m[1]);
    expect(lines.length).toBe(2);
    expect(lines.every((l) => l.length <= 52)).toBe(true);
    expect(svg).toContain(`<title id=`);
    expect(svg).toMatch(new RegExp(`<title[^>]*>${label.replace(/[()?]/g, '\\$&')}: answers by condition</title>`));
  });
});
