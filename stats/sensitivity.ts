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
import { moments } from './descriptives.js';
import { SHORT_RATING_SCALE_POINTS, fmt, fmtP, plural } from './flags.js';
import { hodgesLehmann } from './hodges-lehmann.js';
import { analyseRankSum, rankSumFromAnalysis } from './rank-sum.js';
import type { Sample } from './sample.js';
import type { Alternative, Comparison, ExactMode } from './types.js';
import { freezeDeep } from './types.js';
import { welchFromMoments, welchTest } from './welch.js';

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

/** A Sample from (value, count) pairs in increasing value order, merging equal values and dropping zero counts. */
function rebuild(pairs: { value: number; count: number }[]): Sample {
  const values: number[] = [];
  const counts: number[] = [];
  for (const { value, count } of pairs) {
    if (count <= 0) continue;
    if (values.length > 0 && values[values.length - 1] === value) counts[counts.length - 1] += count;
    else {
      values.push(value === 0 ? 0 : value);
      counts.push(count);
    }
  }
  let n = 0;
  for (const c of counts) n += c;
  return Object.freeze({ values: Float64Array.from(values), counts: Float64Array.from(counts), n });
}

function pairsOf(s: Sample): { value: number; count: number }[] {
  const out: { value: number; count: number }[] = [];
  for (let i = 0; i < s.values.length; i++) out.push({ value: s.values[i], count: s.counts[i] });
  return out;
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

/** Leave out (or, with `clamp`, move to the fence) every answer beyond each group's fences. */
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
    const pairs: { value: number; count: number }[] = [];
    const caught: Altered['values'] = [];
    for (const p of pairsOf(s)) {
      const low = p.value < f.low;
      const high = p.value > f.high;
      if (!low && !high) {
        pairs.push(p);
        continue;
      }
      affected[key] += p.count;
      caught.push({ group: key, value: p.value, count: p.count });
      if (clamp) pairs.push({ value: low ? f.low : f.high, count: p.count });
    }
    // Clamped values sit at the ends, so the order stays increasing after a stable sort by value.
    pairs.sort((x, y) => x.value - y.value);
    out[key] = rebuild(pairs);
    const mid = (f.low + f.high) / 2;
    caught.sort((x, y) => Math.abs(y.value - mid) - Math.abs(x.value - mid));
    values.push(...caught.slice(0, 10));
  }
  return { a: out.a as Sample, b: out.b as Sample, affected, values };
}

/** The single answer whose removal moves Welch's t the most; null when no group can lose one (n < 3). */
function mostInfluential(samples: { a: Sample; b: Sample }, alternative: Alternative): Altered | null {
  const ma = moments(samples.a);
  const mb = moments(samples.b);
  const full = welchFromMoments(ma, mb, { alternative, confidenceLevel: 0.95 }).t;
  if (full === null) return null;
  let best: { key: 'a' | 'b'; index: number; shift: number } | null = null;
  for (const key of ['a', 'b'] as const) {
    const g = key === 'a' ? ma : mb;
    const s = samples[key];
    if (g.n < 3 || g.mean === null || g.variance === null) continue;
    const n1 = g.n - 1;
    for (let i = 0; i < s.values.length; i++) {
      const x = s.values[i];
      const mean1 = (g.n * g.mean - x) / n1;
      const ss = g.variance * (g.n - 1) - (x - g.mean) * (x - mean1);
      const reduced = { n: n1, mean: mean1, variance: Math.max(0, ss / (n1 - 1)) };
      const t1 = welchFromMoments(key === 'a' ? reduced : ma, key === 'b' ? reduced : mb, { alternative, confidenceLevel: 0.95 }).t;
      if (t1 === null) continue;
      const shift = Math.abs(t1 - full);
      if (best === null || shift > best.shift) best = { key, index: i, shift };
    }
  }
  if (best === null) return null;
  const s = samples[best.key];
  const pairs = pairsOf(s);
  pairs[best.index] = { value: pairs[best.index].value, count: pairs[best.index].count - 1 };
  const reduced = rebuild(pairs);
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
    mostInfluential(samples, alternative),
    null,
    (alt) => `Without the single answer ${fmt(alt.values[0].value)} in "${labels[alt.values[0].group]}"`,
    'Neither group has 3 or more answers with a defined t statistic, so no answer can be left out.',
  );

  return freezeDeep({ alpha, full, scenarios, note: NOTE });
}
