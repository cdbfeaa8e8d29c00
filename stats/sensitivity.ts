/**
 * Sensitivity view — what the extreme answers do to a comparison.
 *
 * What it computes. For one comparison of condition a with condition b, both routes (Welch's t-test with its
 * mean difference and interval; the Wilcoxon–Mann–Whitney rank-sum test with the Hodges–Lehmann shift and its
 * interval) are recomputed on three altered copies of the data and set beside the full-data result:
 *
 *   without_far_out            the answers beyond Tukey's far-out fences of their own group are left out
 *                              (below Q1 − 3·IQR or above Q3 + 3·IQR; the "far out" answers of the outlier flag)
 *   winsorised                 answers beyond the inner fences of their own group (Q1 − 1.5·IQR, Q3 + 1.5·IQR)
 *                              are set to the fence they crossed (winsorising at the fences; the count is unchanged)
 *   without_most_influential   the single answer whose removal moves Welch's t the most is left out
 *
 * Quartiles are type 7 (as R's quantile() default), the same ones the group summaries and the outlier flag use,
 * and the multipliers are the flag thresholds (tukeyMultiplier, farOutMultiplier). A group whose IQR is 0 gets no
 * fences (every other answer would be "outlying"), and a whole-number scale of 11 points or fewer gets none at all,
 * as for the outlier flag (every point of a short rating scale is a legitimate answer). Hypotheses and alternatives
 * are those of the comparison: H0 "no difference in means" (Welch) and "neither condition tends to give larger
 * answers" (rank-sum), against the same two- or one-sided alternative.
 *
 * It is a view, not a recommendation to drop or alter data: it shows whether a conclusion rests on a few answers.
 * A scenario's conclusion changes when a test's p-value falls on the other side of alpha than with the full data;
 * then `sentence` says so in plain words for both tests.
 *
 * Method.
 *   Removal works on the (value, count) representation: a count is lowered, so an integer item stays O(K).
 *   Winsorising moves the counts beyond a fence onto the fence value (merging with an equal value).
 *   Most influential answer: for every distinct value x of either group, Welch's t without one answer x is found
 *   from the group's moments by the downdate  n' = n − 1,  mean' = (n·mean − x)/n',
 *   SS' = SS − (x − mean)(x − mean')  (Welford 1962), and the x with the largest |t − t'| is left out
 *   (ties: group a before b, smaller value first). This is the leave-one-out idea of Cook (1977) applied to
 *   the test statistic.
 *   Each altered pair of Samples goes through exactly the functions the comparison runs (welchTest,
 *   analyseRankSum, rankSumFromAnalysis, hodgesLehmann), so every number equals `compare()` on the altered data.
 *
 * References.
 *   Tukey, J. W. (1977). Exploratory Data Analysis. Addison-Wesley. (inner and outer fences)
 *   Dixon, W. J. (1960). Simplified estimation from censored normal samples. Annals of Mathematical Statistics
 *     31(2), 385–391. doi:10.1214/aoms/1177705900 (winsorising)
 *   Cook, R. D. (1977). Detection of influential observation in linear regression. Technometrics 19(1), 15–18.
 *     doi:10.1080/00401706.1977.10489493
 *   Welford, B. P. (1962). Note on a method for calculating corrected sums of squares and products.
 *     Technometrics 4(3), 419–420. doi:10.1080/00401706.1962.10490022
 *
 * Cost. Fences O(1) from the summaries, the influence search O(K_a + K_b); then three recomputations of the two
 * tests, each as costly as the comparison's own Welch, rank-sum and Hodges–Lehmann steps (O(K) for an integer
 * item read from counts; O(n log n) at worst for continuous values).
 */
import { moments, momentsWithout } from './descriptives.js';
import { SHORT_RATING_SCALE_POINTS, fmt, fmtP, plural } from './flags.js';
import { hodgesLehmann } from './hodges-lehmann.js';
import { analyseRankSum, rankSumFromAnalysis } from './rank-sum.js';
import type { Sample } from './sample.js';
import type { Alternative, Comparison, ExactMode } from './types.js';
import { freezeDeep } from './types.js';
import { welchT, welchTest } from './welch.js';

export type SensitivityScenarioCode = 'without_far_out' | 'winsorised' | 'without_most_influential';

export interface SensitivityOptions {
  alternative?: Alternative;
  confidenceLevel?: number;
  exact?: ExactMode;
  /** Significance level for "the conclusion changes". */
  alpha: number;
  /** The item's scale (a short whole-number scale gets no fences; see the header). */
  scale: { min: number; max: number; integer: boolean };
  /** Condition labels for the sentences. */
  labels: { a: string; b: string };
  /** Inner fence multiplier (default 1.5). */
  tukeyMultiplier?: number;
  /** Far-out fence multiplier (default 3). */
  farOutMultiplier?: number;
}

/** Both routes on one version of the data. */
export interface SensitivityResult {
  n: { a: number; b: number };
  welch: { estimate: number | null; lower: number | null; upper: number | null; p: number | null; reason?: string };
  rankSum: { estimate: number | null; lower: number | null; upper: number | null; p: number | null; reason?: string };
}

export interface SensitivityScenario {
  code: SensitivityScenarioCode;
  /** What was done, in words. */
  description: string;
  /** null when the scenario does not apply (no answer beyond the fences, too few answers); see reason. */
  result: SensitivityResult | null;
  /** Answers left out (without_*) or moved to a fence (winsorised), per group. */
  affected: { a: number; b: number };
  /** The values concerned (up to 10 per group, most extreme first), with their counts. */
  values: { group: 'a' | 'b'; value: number; count: number }[];
  /** Fences used per group (null where the group has none). */
  fences: { a: { low: number; high: number } | null; b: { low: number; high: number } | null } | null;
  /** Whether the reading at alpha differs from the full data's, per test. */
  conclusionChanges: { welch: boolean; rankSum: boolean };
  /** One plain sentence when a conclusion changes; null otherwise. */
  sentence: string | null;
  reason?: string;
}

export interface Sensitivity {
  alpha: number;
  full: SensitivityResult;
  scenarios: SensitivityScenario[];
  note: string;
}

const NOTE =
  'A view of what the extreme answers do to each test, not a recommendation to drop or alter data: exclude an answer only for a reason that does not depend on its value.';

function resultOf(a: Sample, b: Sample, alternative: Alternative, confidenceLevel: number, exact: ExactMode): SensitivityResult {
  const w = welchTest(a, b, { alternative, confidenceLevel });
  const analysis = analyseRankSum(a, b, exact);
  const mw = rankSumFromAnalysis(analysis, alternative);
  const hl = hodgesLehmann(a, b, { alternative, confidenceLevel, exact, analysis });
  const welch: SensitivityResult['welch'] = { estimate: w.meanDifference, lower: w.ci.lower, upper: w.ci.upper, p: w.p };
  const wr = w.reason ?? w.ci.reason;
  if (wr) welch.reason = wr;
  const rankSum: SensitivityResult['rankSum'] = { estimate: hl.estimate, lower: hl.ci.lower, upper: hl.ci.upper, p: mw.p };
  const rr = mw.reason ?? hl.reason ?? hl.ci.reason;
  if (rr) rankSum.reason = rr;
  return { n: { a: a.n, b: b.n }, welch, rankSum };
}

/**
 * A Sample from parallel (value, count) arrays in increasing value order (equal neighbours allowed), merging equal
 * values and dropping zero counts; -0 becomes 0. Typed arrays throughout: these Samples hold up to millions of values.
 */
function rebuild(values: Float64Array, counts: Float64Array): Sample {
  const outValues = new Float64Array(values.length);
  const outCounts = new Float64Array(values.length);
  let k = 0;
  let n = 0;
  for (let i = 0; i < values.length; i++) {
    const count = counts[i];
    if (count <= 0) continue;
    const value = values[i] === 0 ? 0 : values[i];
    n += count;
    if (k > 0 && outValues[k - 1] === value) outCounts[k - 1] += count;
    else {
      outValues[k] = value;
      outCounts[k] = count;
      k++;
    }
  }
  return Object.freeze({ values: outValues.slice(0, k), counts: outCounts.slice(0, k), n });
}

type Fences = { low: number; high: number } | null;

function fencesOf(cmp: Comparison, key: 'a' | 'b', multiplier: number, allowed: boolean): Fences {
  const g = cmp.groups[key];
  if (!allowed || g.n < 3 || g.q1 === null || g.q3 === null) return null;
  const iqr = g.q3 - g.q1;
  if (!(iqr > 0)) return null;
  return { low: g.q1 - multiplier * iqr, high: g.q3 + multiplier * iqr };
}

function significant(p: number | null, alpha: number): boolean | null {
  return p === null ? null : p < alpha;
}

function changes(full: SensitivityResult, r: SensitivityResult, alpha: number): { welch: boolean; rankSum: boolean } {
  const fw = significant(full.welch.p, alpha);
  const rw = significant(r.welch.p, alpha);
  const fr = significant(full.rankSum.p, alpha);
  const rr = significant(r.rankSum.p, alpha);
  return { welch: fw !== null && rw !== null && fw !== rw, rankSum: fr !== null && rr !== null && fr !== rr };
}

function pText(p: number | null): string {
  return p === null ? 'undefined' : fmtP(p);
}

/** "Welch's p moves from 0.610 to 0.002; the rank-sum p stays below 0.05 (0.004 → 0.003)." */
function conclusionSentence(lead: string, full: SensitivityResult, r: SensitivityResult, alpha: number, ch: { welch: boolean; rankSum: boolean }): string | null {
  if (!ch.welch && !ch.rankSum) return null;
  const part = (name: string, from: number | null, to: number | null, moved: boolean): string => {
    if (moved) return `${name} moves from ${pText(from)} to ${pText(to)}`;
    if (from === null || to === null) return `${name} is ${pText(to)}`;
    return `${name} stays ${to < alpha ? 'below' : 'at or above'} ${alpha} (${pText(from)} → ${pText(to)})`;
  };
  const first = ch.welch ? part("Welch's p", full.welch.p, r.welch.p, true) : part('the rank-sum p', full.rankSum.p, r.rankSum.p, true);
  const second = ch.welch ? part('the rank-sum p', full.rankSum.p, r.rankSum.p, ch.rankSum) : part("Welch's p", full.welch.p, r.welch.p, false);
  return `${lead}, ${first}; ${second}.`;
}

function describeValues(vals: { group: 'a' | 'b'; value: number; count: number }[], labels: { a: string; b: string }): string {
  const parts: string[] = [];
  for (const key of ['a', 'b'] as const) {
    const mine = vals.filter((v) => v.group === key);
    if (mine.length === 0) continue;
    const shown = mine.slice(0, 3).map((v) => (v.count > 1 ? `${fmt(v.value)} ×${v.count}` : fmt(v.value)));
    parts.push(`${shown.join(', ')}${mine.length > 3 ? ', …' : ''} in "${labels[key]}"`);
  }
  return parts.join('; ');
}

interface Altered {
  a: Sample;
  b: Sample;
  affected: { a: number; b: number };
  values: { group: 'a' | 'b'; value: number; count: number }[];
}

/** First index of the increasing `values` whose value is not below `x` (values.length when none). */
function firstNotBelow(values: Float64Array, x: number): number {
  let lo = 0;
  let hi = values.length;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (values[mid] < x) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

/** First index of the increasing `values` whose value is above `x` (values.length when none). */
function firstAbove(values: Float64Array, x: number): number {
  let lo = 0;
  let hi = values.length;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (values[mid] <= x) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

/**
 * Leave out (or, with `clamp`, move to the fence) every answer beyond each group's fences. The values are increasing,
 * so the answers below the low fence are a prefix and those above the high fence a suffix: found by bisection, the
 * kept middle copied once. The ten answers farthest from the fences' midpoint are among the first ten of the prefix
 * and the last ten of the suffix, listed in increasing value order before the (stable) sort by distance.
 */
function beyondFences(samples: { a: Sample; b: Sample }, fences: { a: Fences; b: Fences }, clamp: boolean): Altered {
  const out: Partial<Record<'a' | 'b', Sample>> = {};
  const affected = { a: 0, b: 0 };
  const values: Altered['values'] = [];
  for (const key of ['a', 'b'] as const) {
    const s = samples[key];
    const f = fences[key];
    if (f === null) {
      out[key] = s;
      continue;
    }
    const keepFrom = firstNotBelow(s.values, f.low);
    const keepTo = Math.max(keepFrom, firstAbove(s.values, f.high));
    let lowCount = 0;
    for (let i = 0; i < keepFrom; i++) lowCount += s.counts[i];
    let highCount = 0;
    for (let i = keepTo; i < s.values.length; i++) highCount += s.counts[i];
    affected[key] += lowCount + highCount;
    const kept = keepTo - keepFrom;
    const lead = clamp && lowCount > 0 ? 1 : 0;
    const tail = clamp && highCount > 0 ? 1 : 0;
    const v = new Float64Array(lead + kept + tail);
    const c = new Float64Array(lead + kept + tail);
    if (lead) {
      v[0] = f.low;
      c[0] = lowCount;
    }
    v.set(s.values.subarray(keepFrom, keepTo), lead);
    c.set(s.counts.subarray(keepFrom, keepTo), lead);
    if (tail) {
      v[lead + kept] = f.high;
      c[lead + kept] = highCount;
    }
    out[key] = rebuild(v, c);
    const caught: Altered['values'] = [];
    for (let i = 0; i < Math.min(keepFrom, 10); i++) caught.push({ group: key, value: s.values[i], count: s.counts[i] });
    for (let i = Math.max(keepTo, s.values.length - 10); i < s.values.length; i++) caught.push({ group: key, value: s.values[i], count: s.counts[i] });
    const mid = (f.low + f.high) / 2;
    caught.sort((x, y) => Math.abs(y.value - mid) - Math.abs(x.value - mid));
    values.push(...caught.slice(0, 10));
  }
  return { a: out.a as Sample, b: out.b as Sample, affected, values };
}

/** The single answer whose removal moves Welch's t the most; null when no group can lose one (n < 3). */
function mostInfluential(samples: { a: Sample; b: Sample }): Altered | null {
  const ma = moments(samples.a);
  const mb = moments(samples.b);
  const full = welchT(ma, mb);
  if (full === null) return null;
  let best: { key: 'a' | 'b'; index: number; shift: number } | null = null;
  for (const key of ['a', 'b'] as const) {
    const g = key === 'a' ? ma : mb;
    const s = samples[key];
    if (g.n < 3 || g.mean === null || g.variance === null) continue;
    const whole = { n: g.n, mean: g.mean, variance: g.variance };
    for (let i = 0; i < s.values.length; i++) {
      const reduced = momentsWithout(whole, s.values[i]);
      const t1 = welchT(key === 'a' ? reduced : ma, key === 'b' ? reduced : mb);
      if (t1 === null) continue;
      const shift = Math.abs(t1 - full);
      if (best === null || shift > best.shift) best = { key, index: i, shift };
    }
  }
  if (best === null) return null;
  const s = samples[best.key];
  const counts = Float64Array.from(s.counts);
  counts[best.index] -= 1;
  const reduced = rebuild(s.values, counts);
  const value = s.values[best.index];
  return {
    a: best.key === 'a' ? reduced : samples.a,
    b: best.key === 'b' ? reduced : samples.b,
    affected: { a: best.key === 'a' ? 1 : 0, b: best.key === 'b' ? 1 : 0 },
    values: [{ group: best.key, value, count: 1 }],
  };
}

/**
 * The sensitivity view of a comparison. `cmp` must be the comparison of exactly these Samples (its quartiles
 * give the fences). Inputs are not mutated. O(K_a + K_b) plus three recomputations of the two tests.
 */
export function sensitivity(cmp: Comparison, samples: { a: Sample; b: Sample }, options: SensitivityOptions): Sensitivity {
  const alternative = options.alternative ?? 'two-sided';
  const level = options.confidenceLevel ?? 0.95;
  const exact = options.exact ?? 'auto';
  const alpha = options.alpha;
  if (!(alpha > 0 && alpha < 1)) throw new RangeError(`alpha is ${String(alpha)}; it must be strictly between 0 and 1`);
  const inner = options.tukeyMultiplier ?? 1.5;
  const outer = options.farOutMultiplier ?? 3;
  const labels = options.labels;
  const { scale } = options;
  const fencesAllowed = !(scale.integer && scale.max - scale.min + 1 <= SHORT_RATING_SCALE_POINTS);
  const full = resultOf(samples.a, samples.b, alternative, level, exact);
  const scenarios: SensitivityScenario[] = [];
  const noChange = { welch: false, rankSum: false };

  const scenario = (
    code: SensitivityScenarioCode,
    description: string,
    altered: Altered | null,
    fences: SensitivityScenario['fences'],
    lead: (alt: Altered) => string,
    emptyReason: string,
  ): void => {
    if (altered === null || altered.affected.a + altered.affected.b === 0) {
      scenarios.push({ code, description, result: null, affected: { a: 0, b: 0 }, values: [], fences, conclusionChanges: noChange, sentence: null, reason: emptyReason });
      return;
    }
    const r = resultOf(altered.a, altered.b, alternative, level, exact);
    const ch = changes(full, r, alpha);
    scenarios.push({
      code,
      description,
      result: r,
      affected: altered.affected,
      values: altered.values,
      fences,
      conclusionChanges: ch,
      sentence: conclusionSentence(lead(altered), full, r, alpha, ch),
    });
  };

  const noFencesReason = fencesAllowed
    ? 'No answer lies beyond the fences (a group whose IQR is 0, or with fewer than 3 answers, has none).'
    : `A whole-number scale of ${SHORT_RATING_SCALE_POINTS} points or fewer has no fences: every point is a legitimate answer.`;

  const far = { a: fencesOf(cmp, 'a', outer, fencesAllowed), b: fencesOf(cmp, 'b', outer, fencesAllowed) };
  scenario(
    'without_far_out',
    `Answers beyond the far-out fences (Q1 − ${outer}·IQR, Q3 + ${outer}·IQR of their own group) left out.`,
    far.a || far.b ? beyondFences(samples, far, false) : null,
    far,
    (alt) => `Without the ${plural(alt.affected.a + alt.affected.b, 'far-out answer', 'far-out answers')} (${describeValues(alt.values, labels)})`,
    noFencesReason,
  );

  const fen = { a: fencesOf(cmp, 'a', inner, fencesAllowed), b: fencesOf(cmp, 'b', inner, fencesAllowed) };
  scenario(
    'winsorised',
    `Answers beyond the fences (Q1 − ${inner}·IQR, Q3 + ${inner}·IQR of their own group) set to the fence they crossed.`,
    fen.a || fen.b ? beyondFences(samples, fen, true) : null,
    fen,
    (alt) => `With the ${plural(alt.affected.a + alt.affected.b, 'answer', 'answers')} beyond the fences pulled in to them (${describeValues(alt.values, labels)})`,
    noFencesReason,
  );

  scenario(
    'without_most_influential',
    "The single answer whose removal moves Welch's t the most left out.",
    mostInfluential(samples),
    null,
    (alt) => `Without the single answer ${fmt(alt.values[0].value)} in "${labels[alt.values[0].group]}"`,
    'Neither group has 3 or more answers with a defined t statistic, so no answer can be left out.',
  );

  return freezeDeep({ alpha, full, scenarios, note: NOTE });
}
