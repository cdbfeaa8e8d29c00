/**
 * welch-anova-effect.ts — an effect size for Welch's ANOVA: the estimated ω² recovered from the F statistic.
 *
 * What it says: the share of the answers' variance that lies between the conditions, estimated without the
 * equal-variance assumption of the classic ANOVA's ω² (its input is Welch's F, not the pooled sums of squares).
 *
 * Method (plain text): with F Welch's statistic, df1 = k − 1 and N the number of answers,
 *   est. ω² = df1·(F − 1) / (df1·(F − 1) + N),
 * floored at 0 (F < 1 means no between-condition variance is estimated). For the classic F this is an exact
 * identity with Hays's ω² = (SS_b − (k − 1)·MS_w)/(SS_total + MS_w) (since SS_b = df1·F·MS_w and
 * SS_total = SS_b + (N − k)·MS_w). Applied to Welch's F it is an approximation that carries the same
 * reading over to unequal variances; no test of its own, and not a published estimator for Welch's test that
 * this file could check against — the tests check the formula and the classic identity only.
 *
 * References
 *   Hays, W. L. (1963). Statistics for Psychologists. Holt, Rinehart & Winston (ω²).
 *   Carroll, R. M. & Nordholm, L. A. (1975). Sampling characteristics of Kelley's ε and Hays' ω. Educational
 *     and Psychological Measurement 35(3), 541–554. doi:10.1177/001316447503500304 (the estimator's bias and
 *     spread for the classic F).
 *
 * Cost: O(1).
 */
import { freezeDeep } from './types.js';

export interface WelchOmegaSquared {
  omegaSquared: number | null;
  reason?: string;
}

/** est. ω² from Welch's F, its df1 and the total number of answers N (null with a reason when F is null). */
export function welchOmegaSquared(f: number | null, df1: number | null, n: number): WelchOmegaSquared {
  if (f === null || df1 === null) return freezeDeep({ omegaSquared: null, reason: "Welch's F is not defined for these data." });
  if (!Number.isFinite(f) || f < 0) throw new RangeError(`f is ${String(f)}; a finite number ≥ 0 is required`);
  if (!Number.isFinite(n) || n <= 0) throw new RangeError(`n is ${String(n)}; a positive number is required`);
  const num = df1 * (f - 1);
  return freezeDeep({ omegaSquared: num <= 0 ? 0 : num / (num + n) });
}
