/**
 * Result types shared by every statistic in `stats/`.
 *
 * Conventions (stated once, here, and referred to everywhere else):
 *  - Differences are always a − b (first group minus second group).
 *  - `u` is the Mann–Whitney U statistic of group a: #(a_i > b_j) + ½·#(a_i = b_j). It equals R's `W`
 *    from `wilcox.test(a, b)` and scipy's `U1` from `mannwhitneyu(a, b)`.
 *  - alternative "greater" means the hypothesis that a tends to be larger than b (mean difference > 0,
 *    shift > 0, P(A > B) > ½); "less" the opposite.
 *  - Results are frozen plain objects. A quantity that is undefined is `null`, and the object that holds
 *    it then carries `reason`, a plain sentence saying why. No NaN or Infinity ever reaches a result.
 *  - A one-sided confidence interval has one bound `null` (unbounded on that side); its `reason` says so.
 */

export type Alternative = 'two-sided' | 'less' | 'greater';
export type ExactMode = 'auto' | 'always' | 'never';

export interface CompareOptions {
  alternative?: Alternative;
  /** Confidence level for every interval, in (0, 1); default 0.95. */
  confidenceLevel?: number;
  /** Rank-sum method: "auto" (default, rule in rank-sum.ts), "always" (exact, error beyond the size limit), "never" (normal approximation). */
  exact?: ExactMode;
}

export interface Interval {
  level: number;
  lower: number | null;
  upper: number | null;
  reason?: string;
}

export interface ShapiroWilk {
  w: number;
  p: number;
}

export interface GroupSummary {
  n: number;
  mean: number | null;
  sd: number | null;
  median: number | null;
  q1: number | null;
  q3: number | null;
  iqr: number | null;
  min: number | null;
  max: number | null;
  /** g1 = m3 / m2^(3/2) (moment estimator; scipy.stats.skew default, bias=True). */
  skewness: number | null;
  /** g2 = m4 / m2² − 3 (moment estimator; scipy.stats.kurtosis default). */
  excessKurtosis: number | null;
  /** Scaled median absolute deviation: 1.4826 · median(|x − median|), as R's mad(). */
  mad: number | null;
  shapiroWilk: ShapiroWilk | null;
  reason?: string;
}

export interface TTestResult {
  t: number | null;
  df: number | null;
  p: number | null;
  meanDifference: number | null;
  se: number | null;
  ci: Interval;
  reason?: string;
}

export interface MannWhitneyResult {
  u: number | null;
  z: number | null;
  p: number | null;
  method: 'exact' | 'normal';
  /** Continuity correction applied to z (0.5 for the normal method, 0 for exact). */
  continuityCorrection: boolean;
  /** True when tied values were present and the variance (normal) or the conditional distribution (exact) accounts for them. */
  tieCorrection: boolean;
  reason?: string;
}

export interface HodgesLehmannResult {
  estimate: number | null;
  ci: Interval & { achievedLevel: number | null };
  reason?: string;
}

export interface EffectSizes {
  cohensD: number | null;
  hedgesG: number | null;
  hedgesGCi: Interval;
  rankBiserial: number | null;
  probabilityOfSuperiority: number | null;
  reason?: string;
}

export interface BrunnerMunzelResult {
  statistic: number | null;
  df: number | null;
  p: number | null;
  reason?: string;
}

export interface YuenWelchResult {
  trim: number;
  t: number | null;
  df: number | null;
  p: number | null;
  /** Trimmed mean of a minus trimmed mean of b. */
  difference: number | null;
  reason?: string;
}

export interface Comparison {
  groups: { a: GroupSummary; b: GroupSummary };
  welch: TTestResult;
  student: TTestResult;
  mannWhitney: MannWhitneyResult;
  hodgesLehmann: HodgesLehmannResult;
  effectSizes: EffectSizes;
  robust: { brunnerMunzel: BrunnerMunzelResult; yuenWelch: YuenWelchResult };
}

/** Deep-freeze a plain result object (arrays and nested objects included). */
export function freezeDeep<T>(value: T): T {
  if (value !== null && typeof value === 'object' && !Object.isFrozen(value)) {
    Object.freeze(value);
    for (const key of Object.keys(value as object)) freezeDeep((value as Record<string, unknown>)[key]);
  }
  return value;
}
