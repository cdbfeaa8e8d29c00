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
 * Three or more conditions (issue 16; types below, methods in anova.ts, kruskal-wallis.ts, games-howell.ts,
 * dunn.ts, equivalence.ts, omnibus-flags.ts):
 *   compareConditions(values[], options)          raw answers of each condition                    O(Σ n_i log n_i)
 *   compareConditionCounts(counts[], options)     per-value counts of a bounded integer item       O(K · k) + pairs
 *   compareConditionSamples(samples[], options)   already-built Samples
 * All return a frozen `ConditionsComparison`: group summaries, Welch's and the classic ANOVA, the
 * Kruskal–Wallis test, every pair (Games–Howell, Dunn; `equivalence` when a margin is given) and the
 * omnibus flags. The single tests (welchAnova, classicAnova, kruskalWallis, gamesHowellPairs, dunnPairs,
 * welchTost, rankTost, equivalence, studentizedRangeUpperTail) are exported too.
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
import { classicAnovaFromMoments, welchAnovaFromMoments, type ClassicAnovaResult, type FTestResult } from './anova.js';
import { describe, moments, scaledMoments, type Moments } from './descriptives.js';
import { dunnPairs, type DunnPair } from './dunn.js';
import { equivalence, type EquivalenceResult } from './equivalence.js';
import type { Flag } from './flags.js';
import { gamesHowellPairs, type GamesHowellPair } from './games-howell.js';
import { kruskalWallisFromRanks, pooledRanks, type KruskalWallisResult } from './kruskal-wallis.js';
import { omnibusFlags } from './omnibus-flags.js';
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
export { classicAnova, fisherUpperTail, welchAnova, type ClassicAnovaResult, type FTestResult } from './anova.js';
export { kruskalWallis, pooledRanks, type KruskalWallisResult, type PooledRanks } from './kruskal-wallis.js';
export { gamesHowellPairs, type GamesHowellPair } from './games-howell.js';
export { dunnPairs, type DunnPair } from './dunn.js';
export { studentizedRangeCdf, studentizedRangeUpperTail } from './studentized-range.js';
export {
  equivalence,
  equivalenceVerdict,
  rankTost,
  welchTost,
  welchTostFromMoments,
  type EquivalenceOptions,
  type EquivalenceResult,
  type EquivalenceVerdict,
  type EquivalenceVerdictCode,
  type RankOneSided,
  type RankTostResult,
  type WelchOneSided,
  type WelchTostResult,
} from './equivalence.js';
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

// ---------------------------------------------------------------------------------------------------
// Three or more conditions
// ---------------------------------------------------------------------------------------------------

export interface ConditionsOptions {
  /** Names of the conditions, for the pairs and the flag messages; default "1", "2", … */
  labels?: readonly string[];
  /** Significance level for the flags and the equivalence verdicts, in (0, 0.5); default 0.05. */
  alpha?: number;
  /** Rank-sum method rule for the rank-based equivalence tests (as for compare); default "auto". */
  exact?: ExactMode;
  /** Equivalence margin m > 0 on the item's scale; when given, every pair carries `equivalence`. */
  equivalenceMargin?: number | null;
}

/** One pair of conditions i < j (input order); every difference is i − j (a = condition i, b = condition j). */
export interface ConditionPair {
  i: number;
  j: number;
  a: string;
  b: string;
  gamesHowell: Omit<GamesHowellPair, 'i' | 'j'>;
  /** Dunn's test: two-sided p and Holm-adjusted two-sided p over all pairs. */
  dunn: Omit<DunnPair, 'i' | 'j'>;
  /** Both TOST routes with verdicts; null when no margin was given. */
  equivalence: EquivalenceResult | null;
}

export interface ConditionsComparison {
  labels: string[];
  groups: GroupSummary[];
  welchAnova: FTestResult;
  classicAnova: ClassicAnovaResult;
  kruskalWallis: KruskalWallisResult;
  pairs: ConditionPair[];
  flags: Flag[];
  alpha: number;
}

function resolveConditionsOptions(k: number, options: ConditionsOptions): { labels: string[]; alpha: number; exact: ExactMode; margin: number | null } {
  const labels = options.labels ? [...options.labels] : Array.from({ length: k }, (_, i) => String(i + 1));
  if (labels.length !== k) throw new RangeError(`labels has ${labels.length} names for ${k} conditions`);
  const alpha = options.alpha ?? 0.05;
  if (typeof alpha !== 'number' || !(alpha > 0 && alpha < 0.5)) throw new RangeError(`alpha is ${String(alpha)}; a number in (0, 0.5) is required`);
  const exact = options.exact ?? 'auto';
  if (!EXACT_MODES.includes(exact)) throw new RangeError(`exact is "${String(exact)}"; use one of ${EXACT_MODES.join(', ')}`);
  const margin = options.equivalenceMargin ?? null;
  if (margin !== null && (typeof margin !== 'number' || !Number.isFinite(margin) || !(margin > 0))) {
    throw new RangeError(`equivalenceMargin is ${String(margin)}; a finite number > 0 (or null) is required`);
  }
  return { labels, alpha, exact, margin };
}

/** Compare k ≥ 2 conditions given as Samples (the core the other two entry points run). */
export function compareConditionSamples(samples: readonly Sample[], options: ConditionsOptions = {}): ConditionsComparison {
  if (!Array.isArray(samples) || samples.length < 2) throw new RangeError('compareConditions needs at least two conditions');
  const k = samples.length;
  const { labels, alpha, exact, margin } = resolveConditionsOptions(k, options);
  const ms = samples.map((s) => moments(s));
  const ranks = pooledRanks(samples);
  const welch = welchAnovaFromMoments(ms);
  const kruskal = kruskalWallisFromRanks(ranks);
  const gh = gamesHowellPairs(ms);
  const dunn = dunnPairs(ranks);
  const pairs: ConditionPair[] = gh.map((g, idx) => {
    const { i, j, ...gamesHowell } = g;
    const { i: _i, j: _j, ...d } = dunn[idx];
    return {
      i,
      j,
      a: labels[i],
      b: labels[j],
      gamesHowell,
      dunn: d,
      equivalence: margin === null ? null : equivalence(samples[i], samples[j], { margin, alpha, exact }),
    };
  });
  const result: ConditionsComparison = {
    labels,
    groups: samples.map((s, i) => summarize(s, ms[i])),
    welchAnova: welch,
    classicAnova: classicAnovaFromMoments(ms),
    kruskalWallis: kruskal,
    pairs,
    flags: [...omnibusFlags({ samples, moments: ms, labels, welch, kruskal, alpha })],
    alpha,
  };
  return freezeDeep(result);
}

/** Compare k ≥ 2 conditions from their raw answers; NaN or ±Infinity throws a RangeError naming "conditions[i][j]". */
export function compareConditions(values: readonly ArrayLike<number>[], options: ConditionsOptions = {}): ConditionsComparison {
  if (!Array.isArray(values)) throw new RangeError('values must be an array with one array of answers per condition');
  return compareConditionSamples(values.map((v, i) => fromValues(v, `conditions[${i}]`)), options);
}

/** Compare k ≥ 2 conditions of a bounded integer item from per-value counts (counts[i][m] answers of value min + m). */
export function compareConditionCounts(counts: readonly ArrayLike<number>[], options: ConditionsOptions & { min?: number } = {}): ConditionsComparison {
  if (!Array.isArray(counts)) throw new RangeError('counts must be an array with one array of counts per condition');
  const { min = 0, ...rest } = options;
  return compareConditionSamples(counts.map((c, i) => fromCounts(c, min, `counts[${i}]`)), rest);
}
export {
  sensitivity,
  type Sensitivity,
  type SensitivityOptions,
  type SensitivityResult,
  type SensitivityScenario,
  type SensitivityScenarioCode,
} from './sensitivity.js';
