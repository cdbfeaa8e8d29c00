/**
 * Quality flags: plain-language warnings that say when a comparison's numbers should not be taken at
 * face value. Pure functions of a Comparison, the two Samples it came from and the experiment's context.
 *
 * Each flag is { code, severity: "info" | "warning", message, detail }. The message is one or two plain
 * sentences for the person reading a dashboard: what was seen and what it means for which test.
 * Thresholds (defaults below, each overridable per experiment through `thresholds`) and their sources:
 *
 *   out_of_range       any value rejected at ingest for this item (count by reason)            — service bookkeeping
 *   outliers           Tukey's fences, 1.5·IQR ("far out" beyond 3·IQR)                         — Tukey (1977) Exploratory Data Analysis
 *                      or |x − median| > 2.5 scaled MADs                                       — Leys et al. (2013) doi:10.1016/j.jesp.2013.03.013
 *                      (a rule is skipped for a group whose IQR or MAD is 0: on a tied scale it would call every other answer an outlier;
 *                      no outliers are flagged on a short rating scale — whole numbers, 11 points or fewer — where every
 *                      point is a legitimate answer and the fences would call the scale's own ends outliers;
 *                      floor_ceiling and heavy_ties describe such data instead — service rule)
 *   non_normal         Shapiro–Wilk p < 0.05 (3 ≤ n ≤ 5000), else |skewness| > 1               — Royston (1995); |skew| > 1: common practice, no source
 *                      severity info when both groups have n ≥ 100 (the t-test is then robust) — common practice (central limit theorem)
 *   unequal_variance   SD ratio > 2                                                            — common practice, no source
 *   small_sample       n < 20 in a group                                                       — common practice, no source
 *   imbalanced         larger group > 1.5 × smaller group                                       — common practice, no source
 *   allocation_mismatch chi-square goodness of fit of answers per condition against the planned
 *                      allocation, p < 0.001                                                  — Pearson chi-square test; threshold common practice
 *   tests_disagree     one of Welch p and rank-sum p below alpha, the other not                — service rule
 *   influential_point  removing one answer (each group's minimum or maximum) moves Welch p across alpha;
 *                      mean and variance are updated in O(1) (Welford downdate)                 — service rule (a leave-one-out check, cf. Cook 1977)
 *   heavy_ties         more than half of all answers share their value with another answer      — common practice, no source
 *                      AND the ties matter: they change the rank-sum method (both groups under 50, where untied data
 *                      would get the exact test, yet the normal approximation was used), or they make the intervals
 *                      coarse (at most COARSE_DISTINCT_VALUES distinct values pooled, or the Hodges–Lehmann interval's
 *                      achieved level more than 0.01 from the level asked for). Ties on a whole-number scale are
 *                      expected and, alone, not worth a note — service rule
 *   floor_ceiling      more than 15 % of a group's answers at the scale minimum or maximum      — Terwee et al. (2007) doi:10.1016/j.jclinepi.2006.03.012
 *   interim            a planned size exists and a group has fewer answers than planned         — Armitage, McPherson & Rowe (1969): nominal p is no stopping rule
 *   excluded           excluded responses were left out                                        — service bookkeeping
 * Three or more conditions (computed by omnibus-flags.ts, same Flag shape):
 *   omnibus_tests_disagree  one of Welch's ANOVA p and the Kruskal–Wallis p below alpha, the other not — service rule
 *   one_condition_drives    an omnibus test below alpha, and leaving out exactly one condition (and no other)
 *                           lifts it to alpha or above                                        — service rule (leave-one-condition-out)
 *
 * Cost: O(K_a + K_b) in the number of distinct values.
 */
import { chiSquareUpperTail } from './distributions.js';
import type { Sample } from './sample.js';
import type { Comparison } from './types.js';
import { freezeDeep } from './types.js';
import { momentsWithout } from './descriptives.js';
import { welchFromMoments } from './welch.js';

export type FlagCode =
  | 'out_of_range'
  | 'outliers'
  | 'non_normal'
  | 'unequal_variance'
  | 'small_sample'
  | 'imbalanced'
  | 'allocation_mismatch'
  | 'tests_disagree'
  | 'influential_point'
  | 'heavy_ties'
  | 'floor_ceiling'
  | 'interim'
  | 'excluded'
  // Weighted comparisons (computed by weight-flags.ts; thresholds and sources in its header).
  | 'unequal_weights'
  | 'dominant_weight'
  | 'weighting_changes_conclusion'
  // three or more conditions (omnibus-flags.ts)
  | 'omnibus_tests_disagree'
  | 'one_condition_drives';

export interface Flag {
  code: FlagCode;
  severity: 'info' | 'warning';
  message: string;
  detail: Record<string, unknown>;
}

export interface FlagThresholds {
  tukeyMultiplier: number;
  farOutMultiplier: number;
  madMultiplier: number;
  normalityP: number;
  skewness: number;
  largeN: number;
  sdRatio: number;
  smallN: number;
  imbalanceRatio: number;
  allocationP: number;
  tieFraction: number;
  floorCeilingFraction: number;
}

export const DEFAULT_FLAG_THRESHOLDS: Readonly<FlagThresholds> = Object.freeze({
  tukeyMultiplier: 1.5,
  farOutMultiplier: 3,
  madMultiplier: 2.5,
  normalityP: 0.05,
  skewness: 1,
  largeN: 100,
  sdRatio: 2,
  smallN: 20,
  imbalanceRatio: 1.5,
  allocationP: 0.001,
  tieFraction: 0.5,
  floorCeilingFraction: 0.15,
});

export interface FlagContext {
  /** Significance level used to read both tests (the experiment's alpha). */
  alpha: number;
  /** Names of the two conditions, for the messages. */
  labels: { a: string; b: string };
  /** The item's scale. */
  scale: { min: number; max: number; integer: boolean };
  /** Values rejected at ingest for this item, by reason (e.g. { out_of_range: 3, not_integer: 1 }). */
  rejected?: Record<string, number>;
  /** Planned answers per condition, if the experiment has one. */
  plannedPerCondition?: number | null;
  /**
   * Answers per condition across the whole experiment with the planned allocation weights (equal when
   * not set), for the allocation check; null or fewer than two conditions skips it.
   */
  allocation?: { conditions: string[]; observed: number[]; weights?: number[] } | null;
  /** How many excluded responses were left out of this comparison. */
  excludedCount?: number;
  thresholds?: Partial<FlagThresholds>;
}

/** Format a number for a flag message (3 significant digits; exponent form for very small or large). */
export const fmt = (x: number, digits = 3): string => {
  if (!Number.isFinite(x)) return String(x);
  if (x !== 0 && (Math.abs(x) < 1e-3 || Math.abs(x) >= 1e6)) return x.toExponential(2);
  return Number(x.toPrecision(digits)).toString();
};
/** Format a p-value for a flag message. */
export const fmtP = (p: number): string => (p < 0.001 ? p.toExponential(1) : p.toFixed(3));
/** "1 answer" / "3 answers". */
export const plural = (n: number, one: string, many: string): string => `${n} ${n === 1 ? one : many}`;

interface GroupView {
  key: 'a' | 'b';
  label: string;
  sample: Sample;
}

/** Sum of counts of values satisfying a predicate. */
function countWhere(s: Sample, pred: (v: number) => boolean): number {
  let c = 0;
  for (let i = 0; i < s.values.length; i++) if (pred(s.values[i])) c += s.counts[i];
  return c;
}

/** Whole-number scales with at most this many points get no outlier flag (see the header). */
export const SHORT_RATING_SCALE_POINTS = 11;

function isShortRatingScale(scale: FlagContext['scale']): boolean {
  return scale.integer && scale.max - scale.min + 1 <= SHORT_RATING_SCALE_POINTS;
}

function outlierFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  const perGroup: Record<string, unknown> = {};
  let total = 0;
  const sentences: string[] = [];
  for (const g of groups) {
    const summary = cmp.groups[g.key];
    if (summary.n < 3 || summary.q1 === null || summary.q3 === null || summary.median === null) continue;
    const iqr = summary.q3 - summary.q1;
    const mad = summary.mad ?? 0;
    const median = summary.median;
    const lowFence = summary.q1 - t.tukeyMultiplier * iqr;
    const highFence = summary.q3 + t.tukeyMultiplier * iqr;
    const lowFar = summary.q1 - t.farOutMultiplier * iqr;
    const highFar = summary.q3 + t.farOutMultiplier * iqr;
    const useTukey = iqr > 0;
    const useMad = mad > 0;
    let tukey = 0;
    let farOut = 0;
    let madCount = 0;
    let any = 0;
    const caught: { value: number; count: number; rules: string[]; distance: number }[] = [];
    for (let i = 0; i < g.sample.values.length; i++) {
      const v = g.sample.values[i];
      const c = g.sample.counts[i];
      const rules: string[] = [];
      if (useTukey && (v < lowFence || v > highFence)) {
        tukey += c;
        rules.push('tukey');
        if (v < lowFar || v > highFar) {
          farOut += c;
          rules.push('far_out');
        }
      }
      if (useMad && Math.abs(v - median) > t.madMultiplier * mad) {
        madCount += c;
        rules.push('mad');
      }
      if (rules.length > 0) {
        any += c;
        caught.push({ value: v, count: c, rules, distance: Math.abs(v - median) });
      }
    }
    if (any === 0) continue;
    caught.sort((x, y) => y.distance - x.distance);
    total += any;
    perGroup[g.key] = {
      condition: g.label,
      count: any,
      tukey,
      farOut,
      mad: madCount,
      fences: useTukey ? { low: lowFence, high: highFence, farLow: lowFar, farHigh: highFar } : null,
      madLimits: useMad ? { low: median - t.madMultiplier * mad, high: median + t.madMultiplier * mad } : null,
      values: caught.slice(0, 10).map(({ value, count, rules }) => ({ value, count, rules })),
      skippedRules: [!useTukey ? 'tukey (IQR is 0)' : null, !useMad ? 'mad (MAD is 0)' : null].filter(Boolean),
    };
    const shown = caught.slice(0, 3).map((x) => fmt(x.value)).join(', ');
    sentences.push(
      `${plural(any, 'answer', 'answers')} in "${g.label}" ${any === 1 ? 'lies' : 'lie'} far from the rest (${shown}${caught.length > 3 ? ', …' : ''})${farOut > 0 ? `, ${farOut} of them far out` : ''}.`,
    );
  }
  if (total === 0) return null;
  return {
    code: 'outliers',
    severity: 'warning',
    message: `${sentences.join(' ')} Extreme answers pull the mean and the t-test; the median, the Hodges–Lehmann shift and the rank-sum test are much less affected.`,
    detail: { ...perGroup, rules: { tukeyMultiplier: t.tukeyMultiplier, farOutMultiplier: t.farOutMultiplier, madMultiplier: t.madMultiplier } },
  };
}

function nonNormalFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  const hits: { condition: string; test: string; value: number }[] = [];
  for (const g of groups) {
    const s = cmp.groups[g.key];
    if (s.shapiroWilk !== null) {
      if (s.shapiroWilk.p < t.normalityP) hits.push({ condition: g.label, test: 'shapiro_wilk_p', value: s.shapiroWilk.p });
    } else if (s.n > 5000 && s.skewness !== null && Math.abs(s.skewness) > t.skewness) {
      hits.push({ condition: g.label, test: 'skewness', value: s.skewness });
    }
  }
  if (hits.length === 0) return null;
  const large = cmp.groups.a.n >= t.largeN && cmp.groups.b.n >= t.largeN;
  const where = hits.map((h) => `"${h.condition}" (${h.test === 'skewness' ? `skewness ${fmt(h.value)}` : `Shapiro–Wilk p = ${fmtP(h.value)}`})`).join(' and ');
  return {
    code: 'non_normal',
    severity: large ? 'info' : 'warning',
    message: large
      ? `Answers in ${where} are not normally distributed. With ${t.largeN} or more answers per group the t-test is still reliable; the rank-sum test does not assume normality.`
      : `Answers in ${where} are not normally distributed and the groups are small, so the t-test's p-value may be off; lean on the rank-sum test.`,
    detail: { groups: hits, largeSamples: large, thresholds: { shapiroWilkP: t.normalityP, skewness: t.skewness, largeN: t.largeN } },
  };
}

function unequalVarianceFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  const sa = cmp.groups.a.sd;
  const sb = cmp.groups.b.sd;
  if (sa === null || sb === null) return null;
  const hi = Math.max(sa, sb);
  const lo = Math.min(sa, sb);
  if (hi === 0) return null;
  const ratio = lo === 0 ? null : hi / lo;
  if (ratio !== null && ratio <= t.sdRatio) return null;
  const wider = sa >= sb ? groups[0].label : groups[1].label;
  return {
    code: 'unequal_variance',
    severity: 'warning',
    message: `Answers in "${wider}" are spread ${ratio === null ? 'while the other group has no spread at all' : `${fmt(ratio, 2)} times as widely as in the other group`}. Welch's t-test already allows for this; the rank-sum test then compares whole distributions rather than locations, so read the Brunner–Munzel test beside it.`,
    detail: { sdA: sa, sdB: sb, ratio, threshold: t.sdRatio },
  };
}

function smallSampleFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  const small = groups.filter((g) => cmp.groups[g.key].n < t.smallN);
  if (small.length === 0) return null;
  const exact = cmp.mannWhitney.method === 'exact';
  return {
    code: 'small_sample',
    severity: 'warning',
    message: `${small.map((g) => `"${g.label}" has ${plural(cmp.groups[g.key].n, 'answer', 'answers')}`).join(' and ')} (fewer than ${t.smallN}). ${exact ? 'The rank-sum p-value is exact, but' : 'With so few answers'} power is low: a real difference can easily go unseen.`,
    detail: { nA: cmp.groups.a.n, nB: cmp.groups.b.n, threshold: t.smallN, rankSumMethod: cmp.mannWhitney.method },
  };
}

function imbalancedFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  const na = cmp.groups.a.n;
  const nb = cmp.groups.b.n;
  if (na === 0 || nb === 0) return null;
  const ratio = Math.max(na, nb) / Math.min(na, nb);
  if (ratio <= t.imbalanceRatio) return null;
  const bigger = na >= nb ? groups[0].label : groups[1].label;
  return {
    code: 'imbalanced',
    severity: 'info',
    message: `"${bigger}" has ${fmt(ratio, 2)} times as many answers as the other group. Unequal groups lose power, and the pooled-variance t-test becomes unreliable when spreads differ too; Welch's test is unaffected.`,
    detail: { nA: na, nB: nb, ratio, threshold: t.imbalanceRatio },
  };
}

function allocationFlag(ctx: FlagContext, t: FlagThresholds): Flag | null {
  const alloc = ctx.allocation;
  if (!alloc || alloc.observed.length < 2) return null;
  const k = alloc.observed.length;
  const weights = alloc.weights && alloc.weights.length === k ? alloc.weights : new Array<number>(k).fill(1);
  const wsum = weights.reduce((s, w) => s + w, 0);
  const total = alloc.observed.reduce((s, o) => s + o, 0);
  if (total === 0 || wsum <= 0) return null;
  let chi2 = 0;
  const expected = weights.map((w) => (total * w) / wsum);
  for (let i = 0; i < k; i++) {
    if (expected[i] <= 0) continue;
    const d = alloc.observed[i] - expected[i];
    chi2 += (d * d) / expected[i];
  }
  const p = chiSquareUpperTail(chi2, k - 1);
  if (!(p < t.allocationP)) return null;
  return {
    code: 'allocation_mismatch',
    severity: 'warning',
    message: `Answers per condition (${alloc.conditions.map((c, i) => `"${c}" ${alloc.observed[i]}`).join(', ')}) are far from the planned allocation (chi-square p = ${fmtP(p)}). Assignment or drop-out may be broken, and every comparison in this study is suspect until that is explained.`,
    detail: { conditions: alloc.conditions, observed: alloc.observed, expected, chiSquare: chi2, df: k - 1, p, threshold: t.allocationP },
  };
}

/** Welch p after removing one observation x from a group of (n, mean, variance); null when undefined. */
function welchWithout(
  ma: { n: number; mean: number; variance: number },
  mb: { n: number; mean: number; variance: number },
  which: 'a' | 'b',
  x: number,
  alternative: 'two-sided' | 'less' | 'greater',
): number | null {
  const g = which === 'a' ? ma : mb;
  if (g.n < 3) return null;
  const reduced = momentsWithout(g, x);
  const r = welchFromMoments(which === 'a' ? reduced : ma, which === 'b' ? reduced : mb, { alternative, confidenceLevel: 0.95 });
  return r.p;
}

function influentialFlag(cmp: Comparison, groups: GroupView[], ctx: FlagContext, alternative: 'two-sided' | 'less' | 'greater'): Flag | null {
  const p = cmp.welch.p;
  const A = cmp.groups.a;
  const B = cmp.groups.b;
  if (p === null || A.mean === null || B.mean === null || A.sd === null || B.sd === null) return null;
  const ma = { n: A.n, mean: A.mean, variance: A.sd * A.sd };
  const mb = { n: B.n, mean: B.mean, variance: B.sd * B.sd };
  const significant = p < ctx.alpha;
  const found: { condition: string; value: number; pWithout: number }[] = [];
  for (const g of groups) {
    const s = cmp.groups[g.key];
    const candidates = s.min === s.max ? [s.min] : [s.min, s.max];
    for (const x of candidates) {
      if (x === null) continue;
      const p1 = welchWithout(ma, mb, g.key, x, alternative);
      if (p1 !== null && p1 < ctx.alpha !== significant) found.push({ condition: g.label, value: x, pWithout: p1 });
    }
  }
  if (found.length === 0) return null;
  const first = found[0];
  return {
    code: 'influential_point',
    severity: 'warning',
    message: `A single answer decides the t-test: without the answer ${fmt(first.value)} in "${first.condition}", Welch's p would be ${fmtP(first.pWithout)} instead of ${fmtP(p)}, on the other side of ${ctx.alpha}. Check that answer, and read the rank-sum test, which one answer cannot move much.`,
    detail: { alpha: ctx.alpha, welchP: p, answers: found },
  };
}

function testsDisagreeFlag(cmp: Comparison, ctx: FlagContext, raised: Flag[]): Flag | null {
  const pw = cmp.welch.p;
  const pm = cmp.mannWhitney.p;
  if (pw === null || pm === null) return null;
  if (pw < ctx.alpha === pm < ctx.alpha) return null;
  const explainers = raised
    .map((f) => f.code)
    .filter((c) => c === 'outliers' || c === 'non_normal' || c === 'unequal_variance' || c === 'influential_point' || c === 'heavy_ties' || c === 'floor_ceiling');
  const names: Record<string, string> = {
    outliers: 'outlying answers',
    non_normal: 'non-normal answers',
    unequal_variance: 'unequal spread',
    influential_point: 'one decisive answer',
    heavy_ties: 'many tied answers',
    floor_ceiling: 'answers piled at a scale end',
  };
  const which = pw < ctx.alpha ? "Welch's t-test" : 'the rank-sum test';
  const other = pw < ctx.alpha ? 'the rank-sum test' : "Welch's t-test";
  return {
    code: 'tests_disagree',
    severity: 'warning',
    message: `${which[0].toUpperCase()}${which.slice(1)} finds a difference at ${ctx.alpha} but ${other} does not (Welch p = ${fmtP(pw)}, rank-sum p = ${fmtP(pm)}). ${
      explainers.length > 0
        ? `The other flags suggest why: ${explainers.map((c) => names[c]).join(', ')}.`
        : 'The two tests ask different questions (means versus the whole distribution); report both.'
    }`,
    detail: { alpha: ctx.alpha, welchP: pw, rankSumP: pm, explainedBy: explainers },
  };
}

/** Pooled distinct values up to which tied data make the rank-based estimate and intervals coarse (see the header). */
export const COARSE_DISTINCT_VALUES = 11;

function heavyTiesFlag(cmp: Comparison, groups: GroupView[], t: FlagThresholds): Flag | null {
  // Pool both groups' values (merge of two sorted distinct lists) and count answers in tie groups.
  const a = groups[0].sample;
  const b = groups[1].sample;
  const n = a.n + b.n;
  if (n < 2) return null;
  let i = 0;
  let j = 0;
  let tied = 0;
  let distinct = 0;
  while (i < a.values.length || j < b.values.length) {
    let c: number;
    if (j >= b.values.length || (i < a.values.length && a.values[i] < b.values[j])) c = a.counts[i++];
    else if (i >= a.values.length || b.values[j] < a.values[i]) c = b.counts[j++];
    else c = a.counts[i++] + b.counts[j++];
    distinct++;
    if (c > 1) tied += c;
  }
  const fraction = tied / n;
  if (!(fraction > t.tieFraction)) return null;
  const exact = cmp.mannWhitney.method === 'exact';
  const achieved = cmp.hodgesLehmann.ci.achievedLevel;
  const methodChanged = !exact && a.n < 50 && b.n < 50;
  const coarse = distinct <= COARSE_DISTINCT_VALUES || (achieved !== null && Math.abs(achieved - cmp.hodgesLehmann.ci.level) > 0.01);
  if (!methodChanged && !coarse) return null;
  return {
    code: 'heavy_ties',
    severity: 'info',
    message: `${Math.round(fraction * 100)} % of answers share their value with another answer (${distinct} distinct values). ${
      methodChanged
        ? 'Because of the ties the rank-sum test uses the normal approximation with a tie correction where untied groups this small would get the exact test'
        : exact
          ? 'The rank-sum p-value comes from the exact distribution given these ties'
          : 'The rank-sum test uses the normal approximation with a tie correction'
    }${coarse ? `, and the Hodges–Lehmann shift and its interval can take only a few values${achieved !== null ? ` (the interval's actual confidence level is ${(achieved * 100).toFixed(1)} %)` : ''}` : ''}.`,
    detail: { tieFraction: fraction, distinctValues: distinct, rankSumMethod: cmp.mannWhitney.method, achievedLevel: achieved, threshold: t.tieFraction, methodChanged, coarse },
  };
}

function floorCeilingFlag(groups: GroupView[], ctx: FlagContext, t: FlagThresholds): Flag | null {
  const hits: { condition: string; atMin: number; atMax: number; fractionAtMin: number; fractionAtMax: number }[] = [];
  for (const g of groups) {
    const s = g.sample;
    if (s.n === 0) continue;
    const atMin = countWhere(s, (v) => v <= ctx.scale.min);
    const atMax = countWhere(s, (v) => v >= ctx.scale.max);
    if (atMin / s.n > t.floorCeilingFraction || atMax / s.n > t.floorCeilingFraction) {
      hits.push({ condition: g.label, atMin, atMax, fractionAtMin: atMin / s.n, fractionAtMax: atMax / s.n });
    }
  }
  if (hits.length === 0) return null;
  const parts = hits.map((h) => {
    const end = h.fractionAtMax >= h.fractionAtMin ? `the top of the scale (${fmt(ctx.scale.max)})` : `the bottom of the scale (${fmt(ctx.scale.min)})`;
    const frac = Math.max(h.fractionAtMax, h.fractionAtMin);
    return `${Math.round(frac * 100)} % of answers in "${h.condition}" sit at ${end}`;
  });
  return {
    code: 'floor_ceiling',
    severity: 'warning',
    message: `${parts.join('; ')}. The scale cannot record how much further those respondents would have gone, so means and differences are compressed toward the bound.`,
    detail: { groups: hits, scale: { min: ctx.scale.min, max: ctx.scale.max }, threshold: t.floorCeilingFraction },
  };
}

/**
 * Compute every flag that applies. `alternative` must be the one the comparison was computed with.
 * Flags come in a fixed order (the order of FlagCode above).
 */
export function computeFlags(
  cmp: Comparison,
  samples: { a: Sample; b: Sample },
  ctx: FlagContext,
  alternative: 'two-sided' | 'less' | 'greater' = 'two-sided',
): readonly Flag[] {
  const t: FlagThresholds = { ...DEFAULT_FLAG_THRESHOLDS, ...(ctx.thresholds ?? {}) };
  const groups: GroupView[] = [
    { key: 'a', label: ctx.labels.a, sample: samples.a },
    { key: 'b', label: ctx.labels.b, sample: samples.b },
  ];
  const flags: Flag[] = [];
  const push = (f: Flag | null): void => {
    if (f) flags.push(f);
  };

  const rejected = ctx.rejected ?? {};
  const rejectedTotal = Object.values(rejected).reduce((s, c) => s + c, 0);
  if (rejectedTotal > 0) {
    const reasonWords: Record<string, string> = { out_of_range: 'outside the scale', not_integer: 'not a whole number', not_a_number: 'not a number' };
    const parts = Object.entries(rejected)
      .filter(([, c]) => c > 0)
      .map(([r, c]) => `${c} ${reasonWords[r] ?? r.replace(/_/g, ' ')}`);
    push({
      code: 'out_of_range',
      severity: 'info',
      message: `${plural(rejectedTotal, 'value was', 'values were')} refused at the door for this item (${parts.join(', ')}) and ${rejectedTotal === 1 ? 'is' : 'are'} not in these results. Many refusals can point to a broken form.`,
      detail: { total: rejectedTotal, byReason: { ...rejected } },
    });
  }
  if (!isShortRatingScale(ctx.scale)) push(outlierFlag(cmp, groups, t));
  push(nonNormalFlag(cmp, groups, t));
  push(unequalVarianceFlag(cmp, groups, t));
  push(smallSampleFlag(cmp, groups, t));
  push(imbalancedFlag(cmp, groups, t));
  push(allocationFlag(ctx, t));
  const influential = influentialFlag(cmp, groups, ctx, alternative);
  const ties = heavyTiesFlag(cmp, groups, t);
  const floor = floorCeilingFlag(groups, ctx, t);
  push(testsDisagreeFlag(cmp, ctx, [...flags, ...(influential ? [influential] : []), ...(ties ? [ties] : []), ...(floor ? [floor] : [])]));
  push(influential);
  push(ties);
  push(floor);

  const planned = ctx.plannedPerCondition ?? null;
  if (planned !== null && planned > 0 && (cmp.groups.a.n < planned || cmp.groups.b.n < planned)) {
    push({
      code: 'interim',
      severity: 'info',
      message: `This is an interim look: ${cmp.groups.a.n} and ${cmp.groups.b.n} of the planned ${planned} answers per condition have arrived. The p-values above are not a stopping rule; to decide early, read the monitoring block, which stays valid however often you look.`,
      detail: { planned, nA: cmp.groups.a.n, nB: cmp.groups.b.n },
    });
  }
  const excluded = ctx.excludedCount ?? 0;
  if (excluded > 0) {
    push({
      code: 'excluded',
      severity: 'info',
      message: `${plural(excluded, 'excluded response was', 'excluded responses were')} left out of this comparison.`,
      detail: { excluded },
    });
  }
  return freezeDeep(flags);
}
