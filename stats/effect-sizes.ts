/**
 * effect-sizes.ts — standardized and rank-based effect sizes for two groups a and b (differences a − b).
 *
 * What it computes
 *   cohensD  = (x̄_a − x̄_b) / s_p, with the pooled SD s_p = √{[(n_a − 1)s_a² + (n_b − 1)s_b²]/(n_a + n_b − 2)}
 *              (Cohen 1988, eq. 2.5.2).
 *   hedgesG  = J(df)·d with df = n_a + n_b − 2 and Hedges' exact small-sample correction
 *              J(df) = Γ(df/2) / (√(df/2)·Γ((df − 1)/2)) (Hedges 1981, eq. 6e), computed through log-gamma
 *              Stirling corrections (distributions.ts hedgesCorrection) so it stays exact for df = 2e6.
 *   hedgesGCi: a two-sided confidence interval at the requested level by inverting the noncentral t
 *              distribution (the "pivot" method of Steiger & Fouladi 1997; Hedges & Olkin 1985 ch. 5):
 *              with t_obs = d / √(1/n_a + 1/n_b) (the pooled t statistic) and α = 1 − level, find
 *                ncp_L with P(T ≤ t_obs | df, ncp_L) = 1 − α/2   (equivalently P(T > t_obs | ncp_L) = α/2),
 *                ncp_U with P(T ≤ t_obs | df, ncp_U) = α/2,
 *              then the interval for δ is [ncp_L, ncp_U]·√(1/n_a + 1/n_b), and the interval reported for g is
 *              that interval multiplied by J(df) (the convention of R's effectsize::hedges_g and MBESS's
 *              ci.smd followed by the J rescaling). Both equations are solved with Brent's method on the
 *              log of the small tail, so the bounds are accurate even when α/2 is tiny.
 *   rankBiserial = 2U/(n_a n_b) − 1 and probabilityOfSuperiority = U/(n_a n_b), where U is the
 *              Mann–Whitney U of a (#(a_i > b_j) + ½ #(a_i = b_j)), supplied by the caller (rank-sum.ts);
 *              PS estimates P(A > B) + ½ P(A = B) (McGraw & Wong 1992; the common-language effect size),
 *              and the rank-biserial is Glass's (1965) r = 2·PS − 1 (Kerby 2014).
 *
 * References
 *   Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. doi:10.4324/9780203771587.
 *   Hedges, L. V. (1981). Distribution theory for Glass's estimator of effect size and related estimators.
 *     J. Educational Statistics 6, 107–128. doi:10.3102/10769986006002107.
 *   Hedges, L. V. & Olkin, I. (1985). Statistical Methods for Meta-Analysis. doi:10.1016/C2009-0-03396-0.
 *   Steiger, J. H. & Fouladi, R. T. (1997). Noncentrality interval estimation and the evaluation of
 *     statistical models. In Harlow, Mulaik & Steiger (eds.), What If There Were No Significance Tests?
 *   McGraw, K. O. & Wong, S. P. (1992). A common language effect size statistic. Psychological Bulletin 111,
 *     361–365. doi:10.1037/0033-2909.111.2.361.
 *   Kerby, D. S. (2014). The simple difference formula. Comprehensive Psychology 3. doi:10.2466/11.IT.3.1.
 *
 * Undefined cases (null with a reason): an empty group (everything); n_a + n_b < 3 (no pooled SD);
 * a pooled SD of 0 (both groups constant); df < 2 for Hedges' g (J(1) = 0); U not supplied.
 *
 * Scale: extreme magnitudes (beyond 2^±200) are rescaled by an exact power of two before the variances are
 * formed (d and g are scale-free), so data near 1e-300 or 1e300 give the same d as ordinary data.
 *
 * Cost: O(K_a + K_b) for the moments (none when the caller passes them, as compareSamples does); the interval needs about 14 noncentral-t evaluations (7 per bound,
 * each a few hundred normal-tail evaluations): about 1 ms, independent of n (n = 1e6 per group included).
 */

import type { EffectSizes, Interval } from './types.js';
import { freezeDeep } from './types.js';
import type { Sample } from './sample.js';
import { scaledMoments, type ScaledMoments } from './descriptives.js';
import { checkConfidenceLevel, hedgesCorrection, noncentralTCdf, noncentralTUpperTail, normalQuantile } from './distributions.js';

/**
 * Brent's method (zeroin) for a root of f in [a, b] with f(a), f(b) of opposite signs.
 * Brent, R. P. (1973). Algorithms for Minimization without Derivatives, ch. 4.
 */
function brentRoot(f: (x: number) => number, a: number, b: number, fa: number, fb: number, relTol: number): number {
  let c = a;
  let fc = fa;
  let d = b - a;
  let e = d;
  for (let iteration = 0; iteration < 200; iteration++) {
    if ((fb > 0 && fc > 0) || (fb < 0 && fc < 0)) {
      c = a;
      fc = fa;
      d = b - a;
      e = d;
    }
    if (Math.abs(fc) < Math.abs(fb)) {
      a = b;
      b = c;
      c = a;
      fa = fb;
      fb = fc;
      fc = fa;
    }
    const tol = 2 * Number.EPSILON * Math.abs(b) + relTol * Math.max(1, Math.abs(b));
    const m = (c - b) / 2;
    if (Math.abs(m) <= tol || fb === 0) return b;
    if (Math.abs(e) >= tol && Math.abs(fa) > Math.abs(fb)) {
      let p: number;
      let q: number;
      const s = fb / fa;
      if (a === c) {
        p = 2 * m * s;
        q = 1 - s;
      } else {
        const qq = fa / fc;
        const r = fb / fc;
        p = s * (2 * m * qq * (qq - r) - (b - a) * (r - 1));
        q = (qq - 1) * (r - 1) * (s - 1);
      }
      if (p > 0) q = -q;
      else p = -p;
      if (2 * p < Math.min(3 * m * q - Math.abs(tol * q), Math.abs(e * q))) {
        e = d;
        d = p / q;
      } else {
        d = m;
        e = m;
      }
    } else {
      d = m;
      e = m;
    }
    a = b;
    fa = fb;
    b += Math.abs(d) > tol ? d : m > 0 ? tol : -tol;
    fb = f(b);
  }
  return b;
}

/**
 * Solve g(ncp) = 0 for a monotone g, starting from a guess and a step; the bracket is widened
 * geometrically until the sign changes. Returns null if no bracket is found.
 */
function solveMonotone(g: (x: number) => number, guess: number, step: number, increasing: boolean): number | null {
  let lo = guess - step;
  let hi = guess + step;
  let glo = g(lo);
  let ghi = g(hi);
  for (let k = 0; k < 80 && !(glo <= 0 && ghi >= 0) && !(glo >= 0 && ghi <= 0); k++) {
    // move towards the root: for an increasing g, a positive value means the root lies lower
    const rootBelow = increasing ? glo > 0 : glo < 0;
    if (rootBelow) {
      hi = lo;
      ghi = glo;
      step *= 2;
      lo = hi - step;
      glo = g(lo);
    } else {
      lo = hi;
      glo = ghi;
      step *= 2;
      hi = lo + step;
      ghi = g(hi);
    }
  }
  if (!((glo <= 0 && ghi >= 0) || (glo >= 0 && ghi <= 0))) return null;
  if (glo === 0) return lo;
  if (ghi === 0) return hi;
  return brentRoot(g, lo, hi, glo, ghi, 1e-13);
}

/**
 * Confidence interval for the noncentrality parameter of a t statistic t_obs with df degrees of freedom:
 * [ncp_L, ncp_U] with P(T > t_obs | ncp_L) = α/2 and P(T ≤ t_obs | ncp_U) = α/2 (two-sided, level 1 − α).
 */
export function noncentralityInterval(tObs: number, df: number, level: number): { lower: number; upper: number } | null {
  checkConfidenceLevel(level);
  const half = (1 - level) / 2;
  const lnHalf = Math.log(half);
  const z = -normalQuantile(half);
  const spread = Math.sqrt(1 + (tObs * tObs) / (2 * df));
  const logOrFloor = (p: number): number => (p > 0 ? Math.log(p) : -1000);
  // ln P(T > t | ncp) − ln(α/2): increasing in ncp
  const lowerEquation = (ncp: number): number => logOrFloor(noncentralTUpperTail(tObs, df, ncp)) - lnHalf;
  // ln P(T ≤ t | ncp) − ln(α/2): decreasing in ncp
  const upperEquation = (ncp: number): number => logOrFloor(noncentralTCdf(tObs, df, ncp)) - lnHalf;
  const step = 0.05 * z * spread + 1e-3;
  const lower = solveMonotone(lowerEquation, tObs - z * spread, step, true);
  const upper = solveMonotone(upperEquation, tObs + z * spread, step, false);
  if (lower === null || upper === null) return null;
  return { lower, upper };
}

/**
 * Effect sizes of a − b. `u` is the Mann–Whitney U of group a (null if not available); `confidenceLevel`
 * is the level of the (two-sided) interval for Hedges' g. O(K_a + K_b) plus the interval's root finding.
 */
export function effectSizes(a: Sample, b: Sample, u: number | null, confidenceLevel: number, known?: ScaledMoments): EffectSizes {
  checkConfidenceLevel(confidenceLevel);
  if (u !== null && (typeof u !== 'number' || !Number.isFinite(u))) throw new RangeError(`u is ${String(u)}; a finite number or null is required`);
  // d and g are scale-free: extreme magnitudes are brought near 1 by an exact power of two first.
  // `known`: scaledMoments(a, b) of these very Samples, when the caller (compareSamples) already has it.
  const { a: ma, b: mb } = known ?? scaledMoments(a, b);
  const na = ma.n;
  const nb = mb.n;
  const reasons: string[] = [];

  let rankBiserial: number | null = null;
  let probabilityOfSuperiority: number | null = null;
  if (na === 0 || nb === 0) {
    reasons.push('Rank-based effect sizes need at least one observation in each group.');
  } else if (u === null) {
    reasons.push('The Mann–Whitney U was not supplied, so the rank-based effect sizes are not computed.');
  } else {
    if (u < 0 || u > na * nb) throw new RangeError(`u is ${u}; it must lie in [0, n_a·n_b] = [0, ${na * nb}]`);
    probabilityOfSuperiority = u / (na * nb);
    rankBiserial = (2 * u) / (na * nb) - 1;
  }

  let cohensD: number | null = null;
  let hedgesG: number | null = null;
  let hedgesGCi: Interval = { level: confidenceLevel, lower: null, upper: null, reason: "No interval: Hedges' g is undefined for these data." };
  const df = na + nb - 2;
  if (na === 0 || nb === 0 || df < 1) {
    reasons.push("Cohen's d and Hedges' g need at least one observation in each group and three in all (a pooled SD).");
  } else {
    let pooledSum = 0;
    if (na > 1) pooledSum += (na - 1) * (ma.variance as number);
    if (nb > 1) pooledSum += (nb - 1) * (mb.variance as number);
    const sp = Math.sqrt(pooledSum / df);
    const difference = (ma.mean as number) - (mb.mean as number);
    if (sp === Infinity) {
      reasons.push("The variances exceed the double-precision range, so Cohen's d and Hedges' g are not computed.");
    } else if (!(sp > 0)) {
      reasons.push("The pooled SD is 0 (both groups constant), so Cohen's d and Hedges' g are undefined.");
    } else {
      cohensD = difference / sp;
      if (df < 2) {
        reasons.push("Hedges' correction J(df) is 0 at df = 1, so Hedges' g needs n_a + n_b ≥ 4.");
      } else {
        const J = hedgesCorrection(df);
        hedgesG = J * cohensD;
        const scale = Math.sqrt(1 / na + 1 / nb);
        const tObs = cohensD / scale;
        const ncp = Number.isFinite(tObs) ? noncentralityInterval(tObs, df, confidenceLevel) : null;
        if (ncp === null) {
          hedgesGCi = { level: confidenceLevel, lower: null, upper: null, reason: 'The noncentral t equations for the interval had no solution in double precision.' };
        } else {
          hedgesGCi = { level: confidenceLevel, lower: J * ncp.lower * scale, upper: J * ncp.upper * scale };
        }
      }
    }
  }

  const result: EffectSizes = { cohensD, hedgesG, hedgesGCi, rankBiserial, probabilityOfSuperiority };
  if (reasons.length > 0) result.reason = reasons.join(' ');
  return freezeDeep(result);
}
