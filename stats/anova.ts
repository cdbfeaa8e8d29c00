/**
 * anova.ts — one-way analysis of variance for three or more conditions (the mean route of the omnibus
 * comparison): Welch's heteroscedastic F test and, for reference, the classic equal-variance F test with
 * its effect sizes η² and ω².
 *
 * Hypotheses: H0: every condition has the same population mean (μ_1 = … = μ_k); the alternative is that
 * at least one mean differs (the F tests are one-sided in F, i.e. "some difference" in any direction).
 *
 * Method (n_i, x̄_i, s_i² the size, mean and variance (n − 1) of condition i; N = Σ n_i; k conditions)
 *   Welch (1951), as R's oneway.test(var.equal = FALSE):
 *     w_i = n_i / s_i²,  W = Σ w_i,  x̃ = Σ w_i x̄_i / W,
 *     Λ = Σ (1 − w_i/W)² / (n_i − 1),
 *     F = [Σ w_i (x̄_i − x̃)² / (k − 1)] / [1 + 2(k − 2)Λ/(k² − 1)],
 *     df1 = k − 1,  df2 = (k² − 1)/(3Λ);  p = P(F_{df1, df2} > F).
 *     Undefined (null with a reason) when a condition has fewer than two answers or zero variance (w_i infinite).
 *   Classic (Fisher), as R's oneway.test(var.equal = TRUE) / anova(lm()):
 *     SS_between = Σ n_i (x̄_i − x̄)², SS_within = Σ (n_i − 1) s_i², F = [SS_b/(k − 1)] / [SS_w/(N − k)],
 *     df1 = k − 1, df2 = N − k.
 *     η² = SS_b / (SS_b + SS_w)  (Pearson's correlation ratio; Cohen 1988, ch. 8);
 *     ω² = (SS_b − (k − 1)·MS_w) / (SS_b + SS_w + MS_w)  (Hays 1963). It is not floored at 0: a negative
 *       estimate is reported as computed (the spread between conditions is below what chance alone gives).
 *     These belong to the mean route as a whole (Welch's F has no agreed variance-explained measure of its own).
 *   F tail: P(F_{d1,d2} > f) = I_y(d2/2, d1/2) with y = d2/(d2 + d1·f) formed directly (no 1 − x), through
 *     the project's regularized incomplete beta (distributions.ts).
 *
 * References
 *   Welch, B. L. (1951). On the comparison of several mean values: an alternative approach. Biometrika
 *     38(3/4), 330–336. doi:10.2307/2332579
 *   Fisher, R. A. (1925). Statistical Methods for Research Workers. Oliver & Boyd.
 *   Hays, W. L. (1963). Statistics for Psychologists. Holt, Rinehart & Winston (ω²).
 *   Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum (η²).
 *   Olejnik, S. & Algina, J. (2003). Generalized eta and omega squared statistics. Psychological Methods
 *     8(4), 434–447. doi:10.1037/1082-989X.8.4.434 (ω² for a one-way design between subjects).
 *
 * Cost: O(Σ K_i) for the moments (K_i distinct values of condition i); O(k) from moments.
 */
import { moments, type Moments } from './descriptives.js';
import { incompleteBeta } from './distributions.js';
import type { Sample } from './sample.js';
import { freezeDeep } from './types.js';

export interface FTestResult {
  f: number | null;
  df1: number | null;
  df2: number | null;
  p: number | null;
  reason?: string;
}

export interface ClassicAnovaResult extends FTestResult {
  /** η² = SS_between / SS_total. */
  etaSquared: number | null;
  /** ω² = (SS_between − (k − 1) MS_within) / (SS_total + MS_within). */
  omegaSquared: number | null;
  ssBetween: number | null;
  ssWithin: number | null;
}

/** P(F > f) for Fisher's F with (df1, df2) degrees of freedom (df2 may be Infinity). */
export function fisherUpperTail(f: number, df1: number, df2: number): number {
  if (typeof f !== 'number' || Number.isNaN(f)) throw new RangeError(`f is ${String(f)}; a number was expected`);
  if (!(df1 > 0) || !(df2 > 0)) throw new RangeError(`df1 = ${df1}, df2 = ${df2}; both must be > 0`);
  if (!(f > 0)) return 1;
  if (f === Infinity) return 0;
  const y = df2 / (df2 + df1 * f);
  return incompleteBeta(y, df2 / 2, df1 / 2);
}

function checkGroups(groups: readonly Sample[]): void {
  if (!Array.isArray(groups)) throw new RangeError('groups must be an array of Samples');
  groups.forEach((g, i) => {
    if (!g || typeof g.n !== 'number') throw new RangeError(`groups[${i}] is not a Sample`);
  });
}

const fUndefined = (reason: string): FTestResult => ({ f: null, df1: null, df2: null, p: null, reason });

/** Welch's heteroscedastic one-way ANOVA from each condition's moments. O(k). */
export function welchAnovaFromMoments(ms: readonly Moments[]): FTestResult {
  const k = ms.length;
  if (k < 2) return freezeDeep(fUndefined('Welch’s ANOVA needs at least two conditions.'));
  for (let i = 0; i < k; i++) {
    if (ms[i].n < 2) return freezeDeep(fUndefined(`Condition ${i + 1} has fewer than two answers, so its variance (and Welch’s F) is undefined.`));
    if (!((ms[i].variance as number) > 0)) {
      return freezeDeep(fUndefined(`Condition ${i + 1} has zero variance (every answer equal), so its weight n/s² is infinite and Welch’s F is undefined.`));
    }
  }
  const w = ms.map((m) => m.n / (m.variance as number));
  const W = w.reduce((s, x) => s + x, 0);
  let centre = 0;
  for (let i = 0; i < k; i++) centre += (w[i] / W) * (ms[i].mean as number);
  let between = 0;
  let lambda = 0;
  for (let i = 0; i < k; i++) {
    const d = (ms[i].mean as number) - centre;
    between += w[i] * d * d;
    const share = 1 - w[i] / W;
    lambda += (share * share) / (ms[i].n - 1);
  }
  const df1 = k - 1;
  if (!(lambda > 0)) return freezeDeep(fUndefined('The weights leave no degrees of freedom for the denominator (Λ = 0).'));
  const f = between / df1 / (1 + (2 * (k - 2) * lambda) / (k * k - 1));
  const df2 = (k * k - 1) / (3 * lambda);
  if (!Number.isFinite(f)) return freezeDeep(fUndefined('Welch’s F exceeds the double-precision range for these data.'));
  return freezeDeep({ f, df1, df2, p: fisherUpperTail(f, df1, df2) });
}

/** Welch's heteroscedastic one-way ANOVA (R: oneway.test(y ~ g, var.equal = FALSE)). O(Σ K_i). */
export function welchAnova(groups: readonly Sample[]): FTestResult {
  checkGroups(groups);
  return welchAnovaFromMoments(groups.map((g) => moments(g)));
}

/** The classic one-way ANOVA from each condition's moments, with η² and ω². O(k). */
export function classicAnovaFromMoments(ms: readonly Moments[]): ClassicAnovaResult {
  const k = ms.length;
  const N = ms.reduce((s, m) => s + m.n, 0);
  const none = (reason: string): ClassicAnovaResult =>
    freezeDeep({ ...fUndefined(reason), etaSquared: null, omegaSquared: null, ssBetween: null, ssWithin: null, reason });
  if (k < 2) return none('The ANOVA needs at least two conditions.');
  if (ms.some((m) => m.n < 1)) return none('A condition has no answers.');
  if (N - k < 1) return none('Every condition has a single answer, so there are no degrees of freedom within conditions.');
  let grand = 0;
  for (const m of ms) grand += (m.n / N) * (m.mean as number);
  let ssBetween = 0;
  let ssWithin = 0;
  for (const m of ms) {
    const d = (m.mean as number) - grand;
    ssBetween += m.n * d * d;
    if (m.n > 1) ssWithin += (m.n - 1) * (m.variance as number);
  }
  const df1 = k - 1;
  const df2 = N - k;
  const msWithin = ssWithin / df2;
  const total = ssBetween + ssWithin;
  if (!(ssWithin > 0)) {
    return freezeDeep({
      f: null,
      df1,
      df2,
      p: null,
      etaSquared: total > 0 ? 1 : null,
      omegaSquared: null,
      ssBetween,
      ssWithin,
      reason: 'Every condition is constant within itself (zero variance within conditions), so F is undefined.',
    });
  }
  const f = ssBetween / df1 / msWithin;
  return freezeDeep({
    f,
    df1,
    df2,
    p: fisherUpperTail(f, df1, df2),
    etaSquared: ssBetween / total,
    omegaSquared: (ssBetween - df1 * msWithin) / (total + msWithin),
    ssBetween,
    ssWithin,
  });
}

/** The classic equal-variance one-way ANOVA (R: oneway.test(y ~ g, var.equal = TRUE)). O(Σ K_i). */
export function classicAnova(groups: readonly Sample[]): ClassicAnovaResult {
  checkGroups(groups);
  return classicAnovaFromMoments(groups.map((g) => moments(g)));
}
