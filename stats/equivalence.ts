/**
 * equivalence.ts — equivalence tests of two conditions against a known margin m > 0 (two one-sided tests,
 * TOST), by the mean-based route (Welch) and the rank-based route (Wilcoxon–Mann–Whitney), each with a
 * verdict in words.
 *
 * Hypotheses (Δ the shift a − b: the mean difference for Welch, the location shift for the rank route)
 *   lower test:  H0: Δ ≤ −m  against  Δ > −m
 *   upper test:  H0: Δ ≥ +m  against  Δ < +m
 *   Equivalence (−m < Δ < m) is shown at level α when BOTH are rejected, i.e. the TOST p = max(p_lower,
 *   p_upper) < α — equivalently when the (1 − 2α) confidence interval lies inside (−m, m).
 *
 * Method
 *   Welch TOST (Schuirmann 1987; Lakens 2017): t_lower = (d + m)/se, p_lower = P(T_ν > t_lower);
 *     t_upper = (d − m)/se, p_upper = P(T_ν < t_upper); ν the Welch–Satterthwaite df; the interval is
 *     Welch's two-sided (1 − 2α) interval for a − b. All through welch.ts (welchFromMoments on the means
 *     shifted by ±m, with alternative "greater" / "less").
 *   Rank TOST (Schuirmann's construction applied to the rank-sum test of a location shift, Bauer 1972): the rank-sum test of (a + m) against b with the
 *     alternative "greater" (lower test; equivalent to wilcox.test(a, b, mu = −m, alternative = "greater"))
 *     and of (a − m) against b with "less" (upper test; mu = +m). Each uses the project's rank-sum test
 *     (rank-sum.ts) on the shifted Sample with the same method rule as the ordinary comparison ("auto":
 *     exact without ties and n < 50 per group, exact conditional with ties when cheap, else the normal
 *     approximation with continuity correction); the method used is reported per test, because a
 *     fractional shift of an integer item breaks the ties between the groups and can change the method.
 *     The shift is applied to the distinct values only (O(K)). The interval is the Hodges–Lehmann
 *     (1 − 2α) interval (hodges-lehmann.ts), the statistic u is U of the shifted a (R's W).
 *   Verdict (both routes; α from the options, the ordinary test two-sided):
 *     "equivalent"    TOST p < α and the ordinary test not significant (p ≥ α);
 *     "trivial"       both significant: a difference exists but it is within the margin;
 *     "different"     the ordinary test significant, the TOST not;
 *     "inconclusive"  neither.
 *
 * References
 *   Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power approach for
 *     assessing the equivalence of average bioavailability. J. Pharmacokinet. Biopharm. 15(6), 657–680.
 *     doi:10.1007/BF01068419
 *   Lakens, D. (2017). Equivalence tests: a practical primer for t tests, correlations, and meta-analyses.
 *     Social Psychological and Personality Science 8(4), 355–362. doi:10.1177/1948550617697177
 *   Bauer, D. F. (1972). Constructing confidence sets using rank statistics. JASA 67(339), 687–690.
 *     doi:10.1080/01621459.1972.10481279 (the rank-sum test of a shift μ: compare a − μ with b)
 *   Wellek, S. (2010). Testing Statistical Hypotheses of Equivalence and Noninferiority, 2nd ed. CRC Press
 *     (background on equivalence testing; its rank-based test is on the P(A > B) scale, not the one used here).
 *
 * Cost: Welch O(K_a + K_b); rank O(K_a + K_b) for the normal method, plus the exact distribution and the
 * Hodges–Lehmann interval where they are used (bounded as in rank-sum.ts and hodges-lehmann.ts).
 */
import { moments, type Moments } from './descriptives.js';
import { hodgesLehmann } from './hodges-lehmann.js';
import { analyseRankSum, rankSumFromAnalysis } from './rank-sum.js';
import type { Sample } from './sample.js';
import { freezeDeep, type ExactMode, type Interval } from './types.js';
import { welchFromMoments } from './welch.js';

export type EquivalenceVerdictCode = 'equivalent' | 'trivial' | 'different' | 'inconclusive';

export interface EquivalenceVerdict {
  code: EquivalenceVerdictCode;
  /** One plain-English sentence. */
  words: string;
}

export interface EquivalenceOptions {
  /** The equivalence margin m > 0: differences inside (−m, m) count as negligible. */
  margin: number;
  /** Significance level α in (0, 0.5); default 0.05. Intervals are at level 1 − 2α. */
  alpha?: number;
  /** Rank-sum method rule, as for the ordinary comparison (default "auto"). */
  exact?: ExactMode;
}

export interface WelchOneSided {
  /** The bound tested: −m (lower test) or +m (upper test). */
  bound: number;
  t: number | null;
  p: number | null;
}

export interface WelchTostResult {
  meanDifference: number | null;
  se: number | null;
  df: number | null;
  lower: WelchOneSided;
  upper: WelchOneSided;
  /** max(p_lower, p_upper). */
  p: number | null;
  /** Welch's two-sided interval at level 1 − 2α. */
  ci: Interval;
  /** The ordinary two-sided Welch p (H0: Δ = 0). */
  ordinaryP: number | null;
  verdict: EquivalenceVerdict | null;
  reason?: string;
}

export interface RankOneSided {
  bound: number;
  /** U of the shifted a (R's W for wilcox.test(a, b, mu = bound)). */
  u: number | null;
  z: number | null;
  p: number | null;
  method: 'exact' | 'normal';
  continuityCorrection: boolean;
  reason?: string;
}

export interface RankTostResult {
  lower: RankOneSided;
  upper: RankOneSided;
  p: number | null;
  /** Hodges–Lehmann estimate and its interval at level 1 − 2α. */
  estimate: number | null;
  ci: Interval;
  /** The ordinary two-sided rank-sum p (H0: no shift) and its method. */
  ordinaryP: number | null;
  ordinaryMethod: 'exact' | 'normal';
  verdict: EquivalenceVerdict | null;
  reason?: string;
}

export interface EquivalenceResult {
  margin: number;
  alpha: number;
  welch: WelchTostResult;
  rank: RankTostResult;
}

function resolve(opts: EquivalenceOptions): { margin: number; alpha: number; exact: ExactMode } {
  const margin = opts?.margin;
  if (typeof margin !== 'number' || !Number.isFinite(margin) || !(margin > 0)) {
    throw new RangeError(`margin is ${String(margin)}; a finite number > 0 is required`);
  }
  const alpha = opts.alpha ?? 0.05;
  if (typeof alpha !== 'number' || !(alpha > 0 && alpha < 0.5)) throw new RangeError(`alpha is ${String(alpha)}; a number in (0, 0.5) is required`);
  const exact = opts.exact ?? 'auto';
  if (exact !== 'auto' && exact !== 'always' && exact !== 'never') throw new RangeError(`exact is "${String(exact)}"; use auto, always or never`);
  return { margin, alpha, exact };
}

const fmt = (x: number): string => Number(x.toPrecision(3)).toString();

/** The verdict from the TOST p and the ordinary two-sided p at level α (rules in the header). */
export function equivalenceVerdict(tostP: number | null, ordinaryP: number | null, alpha: number, margin: number): EquivalenceVerdict | null {
  if (tostP === null || ordinaryP === null) return null;
  const equivalent = tostP < alpha;
  const significant = ordinaryP < alpha;
  const m = fmt(margin);
  if (equivalent && !significant) {
    return { code: 'equivalent', words: `Equivalent: the difference is shown to lie within ±${m}, and no difference from zero was found.` };
  }
  if (equivalent && significant) {
    return { code: 'trivial', words: `Different but within the margin: there is a difference, but it is shown to be smaller than ±${m}, so it is too small to matter.` };
  }
  if (significant) {
    return { code: 'different', words: `Different: there is a difference, and it cannot be shown to lie within ±${m}.` };
  }
  return { code: 'inconclusive', words: `Inconclusive: neither a difference nor equivalence within ±${m} is shown; more answers are needed to tell.` };
}

const shiftMean = (m: Moments, by: number): Moments => ({ n: m.n, mean: m.mean === null ? null : m.mean + by, variance: m.variance });

/** Welch TOST from the two groups' {n, mean, variance} (e.g. published summary statistics). O(1). */
export function welchTostFromMoments(ma: Moments, mb: Moments, options: EquivalenceOptions): WelchTostResult {
  const { margin, alpha } = resolve(options);
  const level = 1 - 2 * alpha;
  const base = welchFromMoments(ma, mb, { alternative: 'two-sided', confidenceLevel: level });
  const lowerTest = welchFromMoments(shiftMean(ma, margin), mb, { alternative: 'greater', confidenceLevel: level });
  const upperTest = welchFromMoments(shiftMean(ma, -margin), mb, { alternative: 'less', confidenceLevel: level });
  if (base.t === null || lowerTest.p === null || upperTest.p === null) {
    return freezeDeep({
      meanDifference: base.meanDifference,
      se: null,
      df: null,
      lower: { bound: -margin, t: null, p: null },
      upper: { bound: margin, t: null, p: null },
      p: null,
      ci: base.ci,
      ordinaryP: null,
      verdict: null,
      reason: base.reason ?? 'Welch’s test is undefined for these data.',
    });
  }
  const p = Math.max(lowerTest.p, upperTest.p);
  return freezeDeep({
    meanDifference: base.meanDifference,
    se: base.se,
    df: base.df,
    lower: { bound: -margin, t: lowerTest.t, p: lowerTest.p },
    upper: { bound: margin, t: upperTest.t, p: upperTest.p },
    p,
    ci: base.ci,
    ordinaryP: base.p,
    verdict: equivalenceVerdict(p, base.p, alpha, margin),
  });
}

/** Welch TOST of a − b against ±margin. O(K_a + K_b). */
export function welchTost(a: Sample, b: Sample, options: EquivalenceOptions): WelchTostResult {
  return welchTostFromMoments(moments(a), moments(b), options);
}

/** The Sample with `by` added to every value (distinct values that become equal are merged). O(K). */
export function shiftSample(s: Sample, by: number): Sample {
  const values: number[] = [];
  const counts: number[] = [];
  for (let i = 0; i < s.values.length; i++) {
    let v = s.values[i] + by;
    if (v === 0) v = 0; // no −0
    if (!Number.isFinite(v)) throw new RangeError(`shifting value ${s.values[i]} by ${by} leaves the double range`);
    if (values.length > 0 && v === values[values.length - 1]) counts[counts.length - 1] += s.counts[i];
    else {
      values.push(v);
      counts.push(s.counts[i]);
    }
  }
  return Object.freeze({ values: Float64Array.from(values), counts: Float64Array.from(counts), n: s.n });
}

function rankOneSided(a: Sample, b: Sample, bound: number, alternative: 'greater' | 'less', exact: ExactMode): RankOneSided {
  // H0: shift = bound. Testing a − bound against b with no shift.
  const shifted = shiftSample(a, -bound);
  const r = rankSumFromAnalysis(analyseRankSum(shifted, b, exact), alternative);
  const out: RankOneSided = { bound, u: r.u, z: r.z, p: r.p, method: r.method, continuityCorrection: r.continuityCorrection };
  if (r.reason) out.reason = r.reason;
  return out;
}

/** Rank-based TOST of the shift a − b against ±margin (two one-sided rank-sum tests on shifted data). */
export function rankTost(a: Sample, b: Sample, options: EquivalenceOptions): RankTostResult {
  const { margin, alpha, exact } = resolve(options);
  const level = 1 - 2 * alpha;
  const analysis = analyseRankSum(a, b, exact);
  const ordinary = rankSumFromAnalysis(analysis, 'two-sided');
  const hl = hodgesLehmann(a, b, { alternative: 'two-sided', confidenceLevel: level, exact, analysis });
  const lower = rankOneSided(a, b, -margin, 'greater', exact);
  const upper = rankOneSided(a, b, margin, 'less', exact);
  const p = lower.p === null || upper.p === null ? null : Math.max(lower.p, upper.p);
  const result: RankTostResult = {
    lower,
    upper,
    p,
    estimate: hl.estimate,
    ci: hl.ci,
    ordinaryP: ordinary.p,
    ordinaryMethod: ordinary.method,
    verdict: equivalenceVerdict(p, ordinary.p, alpha, margin),
  };
  if (p === null) result.reason = lower.reason ?? upper.reason ?? 'The rank-sum test is undefined for these data.';
  return freezeDeep(result);
}

/** Both equivalence routes for one pair of conditions. */
export function equivalence(a: Sample, b: Sample, options: EquivalenceOptions): EquivalenceResult {
  const { margin, alpha } = resolve(options);
  return freezeDeep({ margin, alpha, welch: welchTost(a, b, options), rank: rankTost(a, b, options) });
}
