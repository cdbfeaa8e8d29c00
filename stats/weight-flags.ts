/**
 * Weight flags: plain-language warnings for a weighted comparison (weighted-comparison.ts), in the vocabulary
 * and shape of flags.ts ({ code, severity, message, detail }). Pure functions of the weighted comparison, the
 * unweighted comparison of the same answers (optional) and the experiment's alpha and condition labels.
 *
 *   unequal_weights   in a group, Kish's design effect of unequal weighting 1 + CV² = n Σw²/(Σw)² exceeds 2,
 *                     or the effective sample size (Σw)²/Σw² is below 30 % of the answers
 *                                                                                  — common practice, no source
 *                     (with CV computed with divisor n, 1 + CV² = n / n_eff exactly — Kish 1965, Survey
 *                     Sampling, §11.7 — so the second rule only fires together with the first; both are kept
 *                     because readers know both, and `detail` says which fired)
 *   dominant_weight   one answer carries more than 10 % of its group's total weight in a group of at least 10
 *                     answers                                                      — common practice, no source
 *                     (from per-value sums the largest weight is known only as a lower bound, max over values
 *                     of Σw²/Σw; the flag then fires only when that bound already exceeds the threshold, and says so)
 *   weighting_changes_conclusion
 *                     the weighted and the unweighted test reach different conclusions at alpha (t test against
 *                     Welch's test, or the design-based rank test against the rank-sum test); the message says
 *                     why: how far weighting moves the estimate and how much it widens (or narrows) its
 *                     standard error, and which of the two changes the t statistic more   — service rule
 *
 * Cost: O(1) given the two comparisons.
 */
import { fmt, fmtP, plural, type Flag } from './flags.js';
import type { TTestResult } from './types.js';
import { freezeDeep } from './types.js';
import type { WeightedComparison } from './weighted-comparison.js';

export interface WeightFlagThresholds {
  /** Flag a group whose design effect 1 + CV² exceeds this (default 2). */
  designEffect: number;
  /** Flag a group whose effective n is below this fraction of its answers (default 0.3). */
  effectiveNFraction: number;
  /** Flag a group in which one answer carries more than this share of the total weight (default 0.10)… */
  dominantShare: number;
  /** …provided the group has at least this many answers (default 10). */
  dominantMinN: number;
}

export const DEFAULT_WEIGHT_FLAG_THRESHOLDS: Readonly<WeightFlagThresholds> = Object.freeze({
  designEffect: 2,
  effectiveNFraction: 0.3,
  dominantShare: 0.1,
  dominantMinN: 10,
});

export interface WeightFlagContext {
  alpha: number;
  labels: { a: string; b: string };
  thresholds?: Partial<WeightFlagThresholds>;
}

/** The unweighted results of the same answers; a `Comparison` from compareSamples fits. */
export interface UnweightedResults {
  welch: TTestResult;
  mannWhitney: { p: number | null };
}

function unequalWeightsFlag(cmp: WeightedComparison, ctx: WeightFlagContext, t: WeightFlagThresholds): Flag | null {
  const hits: Record<string, unknown>[] = [];
  const sentences: string[] = [];
  for (const key of ['a', 'b'] as const) {
    const g = cmp.groups[key];
    if (g.effectiveN === null || g.designEffect === null || g.n < 2) continue;
    const byDesignEffect = g.designEffect > t.designEffect;
    const byEffectiveN = g.effectiveN < t.effectiveNFraction * g.n;
    if (!byDesignEffect && !byEffectiveN) continue;
    hits.push({ condition: ctx.labels[key], n: g.n, effectiveN: g.effectiveN, designEffect: g.designEffect, byDesignEffect, byEffectiveN });
    sentences.push(
      `the ${plural(g.n, 'answer', 'answers')} in "${ctx.labels[key]}" carry as much information as about ${fmt(g.effectiveN)} equally weighted ones (design effect ${fmt(g.designEffect)})`,
    );
  }
  if (hits.length === 0) return null;
  return {
    code: 'unequal_weights',
    severity: 'warning',
    message: `The weights are very unequal: ${sentences.join('; ')}. Weighted estimates are correspondingly less precise than the number of answers suggests, and they lean on the few heavily weighted answers.`,
    detail: { groups: hits, thresholds: { designEffect: t.designEffect, effectiveNFraction: t.effectiveNFraction } },
  };
}

function dominantWeightFlag(cmp: WeightedComparison, ctx: WeightFlagContext, t: WeightFlagThresholds): Flag | null {
  const hits: Record<string, unknown>[] = [];
  const sentences: string[] = [];
  for (const key of ['a', 'b'] as const) {
    const g = cmp.groups[key];
    if (g.maxWeightShare === null || g.n < t.dominantMinN || !(g.maxWeightShare > t.dominantShare)) continue;
    hits.push({ condition: ctx.labels[key], n: g.n, maxWeight: g.maxWeight, share: g.maxWeightShare, exact: g.maxWeightExact });
    sentences.push(
      `one answer in "${ctx.labels[key]}" carries ${g.maxWeightExact ? '' : 'at least '}${Math.round(g.maxWeightShare * 100)} % of that group's total weight (${plural(g.n, 'answer', 'answers')} in all)`,
    );
  }
  if (hits.length === 0) return null;
  return {
    code: 'dominant_weight',
    severity: 'warning',
    message: `A single weight dominates: ${sentences.join('; ')}. The weighted results largely reflect that one respondent; check the weight, or consider trimming it.`,
    detail: { groups: hits, thresholds: { dominantShare: t.dominantShare, dominantMinN: t.dominantMinN } },
  };
}

function conclusionFlag(cmp: WeightedComparison, unweighted: UnweightedResults, ctx: WeightFlagContext): Flag | null {
  const alpha = ctx.alpha;
  const wt = cmp.tTest;
  const uw = unweighted.welch;
  const tDiffers = wt.p !== null && uw.p !== null && wt.p < alpha !== uw.p < alpha;
  const pr = cmp.rankTest.p;
  const pu = unweighted.mannWhitney.p;
  const rankDiffers = pr !== null && pu !== null && pr < alpha !== pu < alpha;
  if (!tDiffers && !rankDiffers) return null;
  const parts: string[] = [];
  const detail: Record<string, unknown> = { alpha };
  if (tDiffers) {
    const wp = wt.p as number;
    const up = uw.p as number;
    const dw = wt.meanDifference;
    const du = uw.meanDifference;
    const seRatio = wt.se !== null && uw.se !== null && uw.se > 0 ? wt.se / uw.se : null;
    let why = '';
    if (dw !== null && du !== null && seRatio !== null) {
      const estimateFactor = du !== 0 && dw !== 0 ? Math.abs(dw / du) : null;
      const mostly =
        estimateFactor === null
          ? ''
          : Math.abs(Math.log(estimateFactor)) >= Math.abs(Math.log(seRatio))
            ? ' The change in the estimate matters more: the heavily weighted answers differ from the rest.'
            : seRatio > 1
              ? ' The wider standard error matters more: unequal weights cost precision.'
              : ' The narrower standard error matters more.';
      why = ` Weighting moves the mean difference from ${fmt(du)} to ${fmt(dw)} and makes its standard error ${fmt(seRatio)} times as large.${mostly}`;
      detail.meanDifference = { unweighted: du, weighted: dw };
      detail.seRatio = seRatio;
    }
    parts.push(
      `The weighted t test ${wp < alpha ? 'finds' : 'does not find'} a difference at ${alpha} (p = ${fmtP(wp)}) but the unweighted Welch test ${up < alpha ? 'does' : 'does not'} (p = ${fmtP(up)}).${why}`,
    );
    detail.tTest = { weightedP: wp, unweightedP: up };
  }
  if (rankDiffers) {
    parts.push(
      `The weighted rank test ${(pr as number) < alpha ? 'finds' : 'does not find'} a difference at ${alpha} (p = ${fmtP(pr as number)}) but the unweighted rank-sum test ${(pu as number) < alpha ? 'does' : 'does not'} (p = ${fmtP(pu as number)}).`,
    );
    detail.rankTest = { weightedP: pr, unweightedP: pu };
  }
  parts.push('The weighted results describe the population the weights stand for; the unweighted ones describe the people who answered.');
  return { code: 'weighting_changes_conclusion', severity: 'warning', message: parts.join(' '), detail };
}

/**
 * The weight flags that apply, in the order unequal_weights, dominant_weight, weighting_changes_conclusion.
 * Pass `unweighted` (e.g. the Comparison of the same answers without weights) to check the conclusions.
 */
export function weightFlags(cmp: WeightedComparison, unweighted: UnweightedResults | null, ctx: WeightFlagContext): readonly Flag[] {
  if (!(ctx.alpha > 0 && ctx.alpha < 1)) throw new RangeError(`alpha is ${String(ctx.alpha)}; a number strictly between 0 and 1 is required`);
  const t: WeightFlagThresholds = { ...DEFAULT_WEIGHT_FLAG_THRESHOLDS, ...(ctx.thresholds ?? {}) };
  const flags: Flag[] = [];
  for (const f of [unequalWeightsFlag(cmp, ctx, t), dominantWeightFlag(cmp, ctx, t), unweighted ? conclusionFlag(cmp, unweighted, ctx) : null]) {
    if (f) flags.push(f);
  }
  return freezeDeep(flags);
}
