/**
 * The public surface of `stats/`: compare two conditions on one item, by the mean-based and the
 * rank-based route side by side.
 *
 *   compare(a, b, options)                 raw answers of each condition (any order)        O(n log n)
 *   compareCounts(countsA, countsB, opts)  per-value counts of a bounded integer item         O(K), K distinct values
 *   compareSamples(sa, sb, options)        already-built Samples (e.g. values read in index order)
 *
 * All three return the same frozen `Comparison` (see types.ts for the conventions: differences are
 * a − b; `u` is the U statistic of a, equal to R's W and scipy's U1). `compareCounts` builds Samples
 * from the counts and runs exactly the code `compare` runs, so the two agree on the expanded data.
 *
 * compareSamples computes each group's moments once (scaledMoments in descriptives.ts) and passes them
 * to Welch's and Student's tests, the effect sizes and the group summaries (same numbers, fewer passes).
 *
 * Options: alternative "two-sided" (default) | "less" | "greater"; confidenceLevel in (0, 1), default
 * 0.95; exact "auto" (default) | "always" | "never" for the rank-sum test (rule in rank-sum.ts).
 *
 * Survey weights (block `weighted`; weighted-sample.ts, weighted-comparison.ts, weight-flags.ts):
 *   weightedFromPairs / weightedFromSums / weightedFromIntegerSums   build a WeightedSample (per value: count, Σw, Σw²)
 *   compareWeighted(wa, wb, options)       weighted summaries, design-based t test, Lumley–Scott rank test   O(K)
 *   weightFlags(weighted, unweighted, ctx) unequal_weights, dominant_weight, weighting_changes_conclusion    O(1)
 * Sensitivity view (block `sensitivity`; sensitivity.ts):
 *   sensitivity(cmp, { a, b }, options)   both tests without far-out answers, winsorised, without the most influential answer
 * Covariate adjustment (block `adjusted`; covariate-adjustment.ts):
 *   covariateAdjusted({ outcome, inA, covariates }, options)   Lin (2013) with HC2, beside the unadjusted   O(n·p²)
 */
import { describe, scaledMoments, type Moments } from './descriptives.js';
import { effectSizes } from './effect-sizes.js';
import { hodgesLehmann } from './hodges-lehmann.js';
import { analyseRankSum, rankSumFromAnalysis } from './rank-sum.js';
import { brunnerMunzel, yuenWelch } from './robust.js';
import { fromCounts, fromValues, type Sample } from './sample.js';
import { shapiroWilk } from './shapiro-wilk.js';
import type { Alternative, CompareOptions, Comparison, ExactMode, GroupSummary } from './types.js';
import { freezeDeep } from './types.js';
import { studentTest, welchTest } from './welch.js';

export * from './types.js';
export { fromCounts, fromSortedValues, fromValues, fromWeighted, expand, type Sample } from './sample.js';
export {
  unweighted,
  weightedDescribe,
  weightedFromIntegerSums,
  weightedFromPairs,
  weightedFromSums,
  weightedMean,
  weightedQuantile,
  type WeightedGroupSummary,
  type WeightedSample,
} from './weighted-sample.js';
export { weightedTTest, type WeightedTestOptions } from './weighted-ttest.js';
export { pooledMidRanks, weightedRankTest, type WeightedRankTestResult } from './weighted-rank-test.js';
export { compareWeighted, type WeightedComparison } from './weighted-comparison.js';
export {
  DEFAULT_WEIGHT_FLAG_THRESHOLDS,
  weightFlags,
  type UnweightedResults,
  type WeightFlagContext,
  type WeightFlagThresholds,
} from './weight-flags.js';
export {
  covariateAdjusted,
  type CovariateAdjustment,
  type CovariateAdjustmentInput,
  type CovariateAdjustmentOptions,
  type RegressionEstimate,
} from './covariate-adjustment.js';

interface ResolvedOptions {
  alternative: Alternative;
  confidenceLevel: number;
  exact: ExactMode;
}

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];
const EXACT_MODES: readonly ExactMode[] = ['auto', 'always', 'never'];

/** Check and fill in the options; a bad option is a programming error and throws a RangeError. */
export function resolveOptions(options: CompareOptions = {}): ResolvedOptions {
  const alternative = options.alternative ?? 'two-sided';
  const confidenceLevel = options.confidenceLevel ?? 0.95;
  const exact = options.exact ?? 'auto';
  if (!ALTERNATIVES.includes(alternative)) {
    throw new RangeError(`alternative is "${String(alternative)}"; use one of ${ALTERNATIVES.join(', ')}`);
  }
  if (typeof confidenceLevel !== 'number' || !(confidenceLevel > 0 && confidenceLevel < 1)) {
    throw new RangeError(`confidenceLevel is ${String(confidenceLevel)}; it must be a number strictly between 0 and 1`);
  }
  if (!EXACT_MODES.includes(exact)) {
    throw new RangeError(`exact is "${String(exact)}"; use one of ${EXACT_MODES.join(', ')}`);
  }
  return { alternative, confidenceLevel, exact };
}

function summarize(s: Sample, known?: Moments): GroupSummary {
  const base = describe(s, known);
  const sw = shapiroWilk(s);
  const reasons = [base.reason, sw.result === null ? `Shapiro–Wilk: ${sw.reason}` : undefined].filter(
    (r): r is string => typeof r === 'string' && r.length > 0,
  );
  const summary: GroupSummary = { ...base, shapiroWilk: sw.result };
  delete summary.reason;
  if (reasons.length > 0) summary.reason = reasons.join(' ');
  return summary;
}

/** Compare two Samples (the core every entry point runs). */
export function compareSamples(a: Sample, b: Sample, options: CompareOptions = {}): Comparison {
  const opts = resolveOptions(options);
  // One rank analysis (U, tie-corrected variance, the exact distribution when used) serves both the
  // rank-sum test and the Hodges–Lehmann interval.
  const analysis = analyseRankSum(a, b, opts.exact);
  const mannWhitney = rankSumFromAnalysis(analysis, opts.alternative);
  // One pass of moments per group (after the common power-of-two rescaling) serves Welch, Student and
  // the effect sizes; when no rescaling was needed the group summaries reuse the means too.
  const shared = scaledMoments(a, b);
  const result: Comparison = {
    groups: {
      a: summarize(a, shared.exponent === 0 ? shared.a : undefined),
      b: summarize(b, shared.exponent === 0 ? shared.b : undefined),
    },
    welch: welchTest(a, b, opts, shared),
    student: studentTest(a, b, opts, shared),
    mannWhitney,
    hodgesLehmann: hodgesLehmann(a, b, { ...opts, analysis }),
    effectSizes: effectSizes(a, b, mannWhitney.u, opts.confidenceLevel, shared),
    robust: {
      brunnerMunzel: brunnerMunzel(a, b, { alternative: opts.alternative }),
      yuenWelch: yuenWelch(a, b, { alternative: opts.alternative, trim: 0.2 }),
    },
  };
  return freezeDeep(result);
}

/**
 * Compare the raw answers of two conditions. Inputs are not mutated; NaN or ±Infinity throws a
 * RangeError naming the group and index (e.g. "a[3] is NaN").
 */
export function compare(a: ArrayLike<number>, b: ArrayLike<number>, options: CompareOptions = {}): Comparison {
  resolveOptions(options);
  return compareSamples(fromValues(a, 'a'), fromValues(b, 'b'), options);
}

/**
 * Compare two conditions of a bounded integer item from per-value counts: counts[k] answers of the
 * value min + k. Costs O(K) in the number of possible values, whatever the number of answers.
 */
export function compareCounts(
  countsA: ArrayLike<number>,
  countsB: ArrayLike<number>,
  options: CompareOptions & { min?: number } = {},
): Comparison {
  const { min = 0, ...rest } = options;
  resolveOptions(rest);
  return compareSamples(fromCounts(countsA, min, 'countsA'), fromCounts(countsB, min, 'countsB'), rest);
}
export {
  sensitivity,
  type Sensitivity,
  type SensitivityOptions,
  type SensitivityResult,
  type SensitivityScenario,
  type SensitivityScenarioCode,
} from './sensitivity.js';
