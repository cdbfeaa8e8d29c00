/**
 * Interim monitoring: what may be concluded while a study is still collecting answers.
 *
 * Looking again and again at a nominal p-value and stopping at the first p < 0.05 rejects a true null far
 * more often than 5 % (about 14 % with five looks, 25 % with twenty; Armitage, McPherson & Rowe 1969).
 * This file offers two honest ways to look early, both about the mean difference a − b:
 *
 * 1. Group-sequential boundaries by Lan–DeMets alpha spending (a fixed, small number of planned looks).
 *    Hypotheses: H0 "mean a = mean b" against the two-sided alternative "they differ". At look k, taken at
 *    information fraction t_k (answers so far / planned answers), the test stops and rejects H0 when the
 *    observed z-statistic satisfies |z_k| ≥ c_k. For Welch's t at a look, `welchToZ` gives the normal score
 *    with the same tail probability (the approach to group-sequential t-tests in Jennison & Turnbull 2000,
 *    ch. 3), so that small interim samples are not judged too leniently. The boundaries are symmetric;
 *    each side spends α/2.
 *    Spending functions (cumulative two-sided alpha spent by fraction t, t capped at 1):
 *      O'Brien–Fleming type:  α(t) = 2 · [2 − 2Φ(z_{1−α/4} / √t)]   (each side: 2 − 2Φ(z_{1−α/4}/√t), which
 *                             reaches α/2 at t = 1). The common mistake is to put the whole two-sided α into
 *                             the one-sided formula, α(t) = 2 − 2Φ(z_{1−α/2}/√t) in total; that spends too much
 *                             early (first of five looks 4.38 instead of 4.88) and too little late.
 *      Pocock type:           α(t) = α · ln(1 + (e − 1) t).
 *    Boundary c_k solves  P_H0(|Z_k| ≥ c_k and |Z_j| < c_j for all j < k) = α(t_k) − α(t_{k−1}),
 *    given the boundaries of the looks actually recorded before (any fractions, not only equally spaced).
 *    (Z_1 … Z_K) is the canonical joint distribution: Z_k √t_k is Brownian motion at time t_k, so
 *    Z_k | Z_{k−1} = z is normal with mean z √(t_{k−1}/t_k) and variance (t_k − t_{k−1}) / t_k.
 *    The sub-density of Z_k on the continuation region is propagated by recursive numerical integration
 *    (Armitage, McPherson & Rowe 1969) with the grid and Simpson weights of Jennison & Turnbull (2000),
 *    section 19.2: 6r − 1 points around the mean (spacing finer near it, tails to ±(3 + 4 ln r)), cut at the
 *    boundaries, midpoints added. Default r = 48 (J&T report r = 16 already gives about 1e-6 accuracy in
 *    probabilities). Each boundary is found by bisection to 1e-12 in z.
 *    A look that spends no alpha (a fraction so small that α(t) underflows, or a look after t = 1 when
 *    everything is spent) has boundaryZ = null and cannot be crossed.
 *
 * 2. Anytime-valid inference (looking after every answer, no plan needed): the asymptotic confidence
 *    sequence of Waudby-Smith, Arbour, Sinha, Kennedy & Ramdas (2021/2024), i.e. the Gaussian-mixture boundary
 *    (Robbins 1970) with plug-in variance, applied to the difference of means.
 *      V = s_a²/n_a + s_b²/n_b (variance of the estimate), θ̂ = mean_a − mean_b, z = θ̂ / √V.
 *      Time is the effective number of answer pairs  t = (s_a² + s_b²) / V  (= n per condition when balanced).
 *      Mixing parameter ρ (standardised scale) from the paper's formula for a target time t*:
 *        ρ² = (−2 ln α + ln(1 − 2 ln α)) / t*,  t* = planned answers per condition, or 500 by default
 *      (the sequence is tightest near t*; its width changes slowly away from it). With x = ρ² t:
 *        confidence sequence: θ̂ ± √( V · (x + 1)/x · (ln(x + 1) − 2 ln α) )
 *        anytime-valid p:     p = min(1, √(x + 1) · exp(−x z² / (2 (x + 1))))
 *      p is the reciprocal of the normal-mixture likelihood ratio at θ = 0; "p ≤ α" is exactly "0 is outside
 *      the level 1 − α sequence". This is the same statistic as the normal-mixture mSPRT of Johari, Koomen,
 *      Pekelis & Walsh (2022) with mixing variance τ² = ρ² (s_a² + s_b²). By Ville's inequality, P(p_t ≤ α at any t) ≤ α
 *      (asymptotically, as the variance estimates settle): p may be read after every answer, and a caller that
 *      keeps history may report the running minimum of p and the running intersection of the intervals,
 *      which are equally valid. Validity for two streams assumes a stable allocation ratio (balanced
 *      assignment keeps it within one block).
 *    A betting confidence sequence for bounded items (Waudby-Smith & Ramdas 2024) is not implemented here:
 *    it needs the answers in arrival order, not the sufficient statistics this function receives.
 *
 * References:
 *   Armitage P, McPherson CK, Rowe BC (1969). Repeated significance tests on accumulating data. JRSS A 132:235–244. doi:10.2307/2343787
 *   Lan KKG, DeMets DL (1983). Discrete sequential boundaries for clinical trials. Biometrika 70:659–663. doi:10.1093/biomet/70.3.659
 *   Jennison C, Turnbull BW (2000). Group Sequential Methods with Applications to Clinical Trials. Chapman & Hall/CRC, ch. 7 and 19.
 *   Waudby-Smith I, Arbour D, Sinha R, Kennedy EH, Ramdas A (2021). Time-uniform central limit theory and
 *     asymptotic confidence sequences. arXiv:2103.06476; Annals of Statistics (2024).
 *   Robbins H (1970). Statistical methods related to the law of the iterated logarithm. Annals of Mathematical
 *     Statistics 41:1397–1409. doi:10.1214/aoms/1177696786
 *   Howard SR, Ramdas A, McAuliffe J, Sekhon J (2021). Time-uniform, nonparametric, nonasymptotic confidence
 *     sequences. Annals of Statistics 49:1055–1080. doi:10.1214/20-AOS1991
 *   Johari R, Koomen P, Pekelis L, Walsh D (2022). Always valid inference: continuous monitoring of A/B tests.
 *     Operations Research 70:1806–1821. doi:10.1287/opre.2021.2135 (first circulated 2015/2017 as Johari,
 *     Pekelis & Walsh, "Always valid inference").
 *   Waudby-Smith I, Ramdas A (2024). Estimating means of bounded random variables by betting. JRSS B 86:1–27. doi:10.1093/jrsssb/qkad009
 *
 * Cost: boundaries for K looks O(K · m²) with m ≈ 12 r grid points, plus O(K · m · 45) for the bisections
 * (about 0.1–0.2 s for 20 looks at r = 48 on this machine);
 * anytimeValid O(1).
 */

import { normalCdf, normalQuantile, normalUpperTail, studentUpperTail } from './distributions.js';
import { freezeDeep, type Interval } from './types.js';

export type SpendingFunction = 'obrien-fleming' | 'pocock';

export interface BoundaryOptions {
  /** Two-sided significance level, in (0, 1); each side spends α/2. */
  alpha: number;
  spending: SpendingFunction;
  /** Grid size parameter r of Jennison & Turnbull (2000, §19.2); default 48, at least 4. */
  gridSize?: number;
}

export interface LookBoundary {
  /** Information fraction of this look (answers so far / planned answers). */
  fraction: number;
  /** Two-sided alpha spent up to and including this look, α(min(t, 1)). */
  cumulativeAlpha: number;
  /** Two-sided alpha spent at this look: α(t_k) − α(t_{k−1}). */
  alphaSpent: number;
  /** Critical |z| at this look; null when the look spends no alpha (see reason). */
  boundaryZ: number | null;
  /** The two-sided nominal p-value matching the boundary, 2·(1 − Φ(boundaryZ)). */
  nominalP: number | null;
  reason?: string;
}

const DEFAULT_GRID = 48;
const MIN_INCREMENT = 1e-300;

function checkAlpha(alpha: number): void {
  if (typeof alpha !== 'number' || !(alpha > 0 && alpha < 1)) {
    throw new RangeError(`alpha is ${String(alpha)}; it must be a number strictly between 0 and 1`);
  }
}

function checkFractions(fractions: readonly number[]): void {
  for (let i = 0; i < fractions.length; i++) {
    const t = fractions[i];
    if (typeof t !== 'number' || !Number.isFinite(t) || !(t > 0)) {
      throw new RangeError(`fractions[${i}] is ${String(t)}; an information fraction must be a finite number > 0`);
    }
    if (i > 0 && !(t > fractions[i - 1])) {
      throw new RangeError(`fractions[${i}] = ${t} is not greater than fractions[${i - 1}] = ${fractions[i - 1]}; looks must be in increasing order of information`);
    }
  }
}

function checkGrid(r: number | undefined): number {
  const g = r ?? DEFAULT_GRID;
  if (!Number.isInteger(g) || g < 4 || g > 1000) throw new RangeError(`gridSize is ${String(r)}; use a whole number between 4 and 1000`);
  return g;
}

/**
 * Cumulative two-sided alpha spent by information fraction t (t ≥ 1 spends everything).
 * O'Brien–Fleming type: 2·(2 − 2Φ(z_{1−α/4}/√t)); Pocock type: α·ln(1 + (e − 1)t). O(1).
 */
export function spendingFunction(t: number, alpha: number, spending: SpendingFunction): number {
  checkAlpha(alpha);
  if (typeof t !== 'number' || Number.isNaN(t) || t < 0) throw new RangeError(`t is ${String(t)}; an information fraction must be ≥ 0`);
  if (t === 0) return 0;
  if (t >= 1) return alpha;
  if (spending === 'obrien-fleming') {
    // Each side spends α/2 with the one-sided O'Brien–Fleming-type function 2 − 2Φ(z_{1−(α/2)/2} / √t).
    const zq = -normalQuantile(alpha / 4); // z_{1−α/4}
    return 2 * (2 * normalUpperTail(zq / Math.sqrt(t)));
  }
  if (spending === 'pocock') return alpha * Math.log(1 + (Math.E - 1) * t);
  throw new RangeError(`spending is ${String(spending)}; use "obrien-fleming" or "pocock"`);
}

// ---------------------------------------------------------------------------------------------------------
// Recursive numerical integration (Jennison & Turnbull 2000, §19.2)
// ---------------------------------------------------------------------------------------------------------

interface Grid {
  z: Float64Array;
  /** Simpson weight × sub-density at z (so sums over the grid are integrals). */
  f: Float64Array;
}

const INV_SQRT_2PI = 0.3989422804014327;

function phi(x: number): number {
  return INV_SQRT_2PI * Math.exp(-0.5 * x * x);
}

/** Grid points and Simpson weights for a look with mean `center`, continuation interval (lo, hi). */
function simpsonGrid(center: number, lo: number, hi: number, r: number): { z: Float64Array; w: Float64Array } {
  const base: number[] = [];
  const logR = Math.log(r);
  for (let i = 1; i <= 6 * r - 1; i++) {
    let x: number;
    if (i < r) x = -3 - 4 * (logR - Math.log(i));
    else if (i <= 5 * r) x = -3 + (3 * (i - r)) / (2 * r);
    else x = 3 + 4 * (logR - Math.log(6 * r - i));
    base.push(center + x);
  }
  const lowEnd = lo > base[0] ? lo : base[0];
  const highEnd = hi < base[base.length - 1] ? hi : base[base.length - 1];
  const pts: number[] = [lowEnd];
  for (const x of base) if (x > lowEnd && x < highEnd) pts.push(x);
  pts.push(highEnd);
  const m = 2 * pts.length - 1;
  const z = new Float64Array(m);
  for (let i = 0; i < pts.length; i++) z[2 * i] = pts[i];
  for (let i = 0; i < pts.length - 1; i++) z[2 * i + 1] = 0.5 * (pts[i] + pts[i + 1]);
  const w = new Float64Array(m);
  // 1-based Simpson weights of J&T: w1 = (z3 − z1)/6, even i: 4(z_{i+1} − z_{i−1})/6, odd interior: (z_{i+2} − z_{i−2})/6, last (z_m − z_{m−2})/6.
  w[0] = (z[2] - z[0]) / 6;
  w[m - 1] = (z[m - 1] - z[m - 3]) / 6;
  for (let i = 1; i < m - 1; i++) {
    w[i] = i % 2 === 1 ? (4 * (z[i + 1] - z[i - 1])) / 6 : (z[i + 2] - z[i - 2]) / 6;
  }
  return { z, w };
}

/**
 * The recursion state: `prev` holds the grid of the previous look and, at each grid point, Simpson weight ×
 * sub-density of Z there (null before the first look); `tPrev` is that look's fraction; drift θ gives
 * E Z_k = θ √t_k.
 */
class Recursion {
  private prev: Grid | null = null;
  private tPrev = 0;
  constructor(private readonly drift: number, private readonly r: number) {}

  /** P(exit above b at the look at fraction t, not having stopped before). */
  upperExit(t: number, b: number): number {
    if (b === Infinity) return 0;
    return this.exit(t, b, normalUpperTail);
  }

  /** P(exit below a at the look at fraction t, not having stopped before). */
  lowerExit(t: number, a: number): number {
    if (a === -Infinity) return 0;
    return this.exit(t, a, normalCdf);
  }

  /** The exit probability across `bound` at fraction t, with `tail` the normal tail on the exit side. */
  private exit(t: number, bound: number, tail: (z: number) => number): number {
    if (this.prev === null) return tail(bound - this.drift * Math.sqrt(t));
    const { z, f } = this.prev;
    const sd = Math.sqrt(t - this.tPrev);
    const sqt = Math.sqrt(t);
    const sq0 = Math.sqrt(this.tPrev);
    const shift = this.drift * (t - this.tPrev);
    let s = 0;
    for (let j = 0; j < z.length; j++) s += f[j] * tail((bound * sqt - z[j] * sq0 - shift) / sd);
    return s;
  }

  /** Move to the look at fraction t with continuation region (a, b): compute the sub-density there. */
  advance(t: number, a: number, b: number): void {
    const center = this.drift * Math.sqrt(t);
    const { z, w } = simpsonGrid(center, a, b, this.r);
    const f = new Float64Array(z.length);
    if (this.prev === null) {
      for (let i = 0; i < z.length; i++) f[i] = w[i] * phi(z[i] - center);
    } else {
      const pz = this.prev.z;
      const pf = this.prev.f;
      const sd = Math.sqrt(t - this.tPrev);
      const sqt = Math.sqrt(t);
      const sq0 = Math.sqrt(this.tPrev);
      const shift = this.drift * (t - this.tPrev);
      const scale = sqt / sd;
      for (let i = 0; i < z.length; i++) {
        const zi = z[i] * sqt - shift;
        let s = 0;
        for (let j = 0; j < pz.length; j++) s += pf[j] * phi((zi - pz[j] * sq0) / sd);
        f[i] = w[i] * scale * s;
      }
    }
    this.prev = { z, f };
    this.tPrev = t;
  }
}

/**
 * Symmetric two-sided boundaries for looks at the given information fractions, from any cumulative two-sided
 * spending function (non-decreasing, 0 at t = 0). The named spending functions go through
 * `spendingBoundaries`; this one is exported for checks and custom spending. O(K · m²).
 */
export function boundariesFromSpending(
  fractions: readonly number[],
  cumulativeAlpha: (t: number) => number,
  gridSize?: number,
): readonly LookBoundary[] {
  checkFractions(fractions);
  const r = checkGrid(gridSize);
  const rec = new Recursion(0, r);
  const out: LookBoundary[] = [];
  let spentBefore = 0;
  for (let k = 0; k < fractions.length; k++) {
    const t = fractions[k];
    const cum = cumulativeAlpha(t);
    if (!Number.isFinite(cum) || cum < 0 || cum >= 1) throw new RangeError(`spending at fractions[${k}] = ${t} is ${cum}; it must be in [0, 1)`);
    const increment = Math.max(0, cum - spentBefore);
    let b = Infinity;
    let reason: string | undefined;
    if (increment < MIN_INCREMENT) {
      reason =
        cum > 0 && spentBefore >= cum
          ? 'All alpha was spent at earlier looks: this look cannot reject.'
          : 'The spending function spends (practically) no alpha this early: this look cannot reject.';
    } else {
      const half = increment / 2; // symmetric boundaries: each side gets half the increment
      let lo = 0;
      let hi = 40;
      if (rec.upperExit(t, lo) < half) {
        // Cannot happen for a proper spending function (the continuation mass exceeds the increment).
        throw new RangeError(`the spending increment ${increment} at fractions[${k}] exceeds the probability of reaching this look`);
      }
      while (hi - lo > 1e-12) {
        const mid = 0.5 * (lo + hi);
        if (rec.upperExit(t, mid) > half) lo = mid;
        else hi = mid;
      }
      b = 0.5 * (lo + hi);
    }
    const entry: LookBoundary =
      b === Infinity
        ? { fraction: t, cumulativeAlpha: cum, alphaSpent: increment, boundaryZ: null, nominalP: null, reason }
        : { fraction: t, cumulativeAlpha: cum, alphaSpent: increment, boundaryZ: b, nominalP: 2 * normalUpperTail(b) };
    out.push(entry);
    spentBefore = Math.max(spentBefore, cum);
    if (k < fractions.length - 1) rec.advance(t, -b, b);
  }
  return freezeDeep(out);
}

/**
 * Lan–DeMets symmetric two-sided boundaries (each side spending α/2) for looks at the given information
 * fractions, O'Brien–Fleming or Pocock type. Each boundary depends on the fractions and boundaries of the
 * looks before it, never on later ones, so recording a new look leaves earlier boundaries unchanged.
 */
export function spendingBoundaries(fractions: readonly number[], opts: BoundaryOptions): readonly LookBoundary[] {
  checkAlpha(opts.alpha);
  if (opts.spending !== 'obrien-fleming' && opts.spending !== 'pocock') {
    throw new RangeError(`spending is ${String(opts.spending)}; use "obrien-fleming" or "pocock"`);
  }
  return boundariesFromSpending(fractions, (t) => spendingFunction(t, opts.alpha, opts.spending), opts.gridSize);
}

export interface ExitProbabilities {
  /** P(first crossing at look k, above +c_k). */
  upper: number[];
  /** P(first crossing at look k, below −c_k). */
  lower: number[];
  /** Sum of both over all looks: the overall rejection probability. */
  total: number;
}

/**
 * Probabilities of first crossing the symmetric boundaries ±c_k at each look, for a drift θ with
 * E[Z_k] = θ·√t_k (θ = 0 is H0; θ = expected z at full information gives power). A null boundary never
 * stops. O(K · m²).
 */
export function exitProbabilities(
  fractions: readonly number[],
  boundaries: readonly (number | null)[],
  opts: { drift?: number; gridSize?: number } = {},
): ExitProbabilities {
  checkFractions(fractions);
  if (boundaries.length !== fractions.length) throw new RangeError('boundaries and fractions differ in length');
  for (let i = 0; i < boundaries.length; i++) {
    const b = boundaries[i];
    if (b !== null && (typeof b !== 'number' || !Number.isFinite(b) || b <= 0)) {
      throw new RangeError(`boundaries[${i}] is ${String(b)}; a boundary must be a finite number > 0 or null`);
    }
  }
  const drift = opts.drift ?? 0;
  if (!Number.isFinite(drift)) throw new RangeError(`drift is ${String(drift)}; it must be finite`);
  const rec = new Recursion(drift, checkGrid(opts.gridSize));
  const upper: number[] = [];
  const lower: number[] = [];
  let total = 0;
  for (let k = 0; k < fractions.length; k++) {
    const b = boundaries[k] ?? Infinity;
    const u = rec.upperExit(fractions[k], b);
    const l = rec.lowerExit(fractions[k], -b);
    upper.push(u);
    lower.push(l);
    total += u + l;
    if (k < fractions.length - 1) rec.advance(fractions[k], -b, b);
  }
  return freezeDeep({ upper, lower, total });
}

export interface LookInput {
  fraction: number;
  /** Observed z-statistic for a − b at this look (see welchToZ); null when it could not be computed. */
  z: number | null;
}

export interface LookResult extends LookBoundary {
  observedZ: number | null;
  /** |observedZ| ≥ boundaryZ. */
  crossed: boolean;
  /** Which group is ahead when crossed ("a" when z > 0: a has the larger mean); null otherwise. */
  direction: 'a' | 'b' | null;
}

export interface SequentialMonitoring {
  method: string;
  spending: SpendingFunction;
  alpha: number;
  looks: LookResult[];
  /** Index of the first look whose boundary was crossed, or null. */
  firstCrossing: number | null;
}

/**
 * Normal score with the same tail probability as Welch's (or Student's) t with df degrees of freedom:
 * sign(t) · Φ⁻¹(1 − P(T > |t|)). Use it to put an interim t on the z scale of the boundaries. O(1).
 */
export function welchToZ(t: number, df: number): number {
  if (!Number.isFinite(t)) throw new RangeError(`t is ${String(t)}; it must be finite`);
  if (!(df > 0) || Number.isNaN(df)) throw new RangeError(`df is ${String(df)}; it must be > 0`);
  if (t === 0) return 0;
  const tail = studentUpperTail(Math.abs(t), df);
  if (tail === 0) return t > 0 ? 40 : -40; // beyond every boundary this file can produce (≤ 40)
  const z = -normalQuantile(tail);
  return t > 0 ? z : -z;
}

/** Compare one observed z with one boundary. O(1). */
export function evaluateLook(observedZ: number | null, boundaryZ: number | null): { crossed: boolean; direction: 'a' | 'b' | null } {
  if (observedZ !== null && !Number.isFinite(observedZ)) throw new RangeError(`observedZ is ${String(observedZ)}; it must be finite or null`);
  if (observedZ === null || boundaryZ === null) return { crossed: false, direction: null };
  const crossed = Math.abs(observedZ) >= boundaryZ;
  return { crossed, direction: crossed ? (observedZ > 0 ? 'a' : 'b') : null };
}

/**
 * Every recorded look with its boundary (given the looks before it), its observed z and whether it was
 * crossed; `firstCrossing` is where a study following the plan would have stopped. O(K · m²).
 */
export function evaluateLooks(looks: readonly LookInput[], opts: BoundaryOptions): SequentialMonitoring {
  const fractions = looks.map((l) => l.fraction);
  looks.forEach((l, i) => {
    if (l.z !== null && (typeof l.z !== 'number' || !Number.isFinite(l.z))) throw new RangeError(`looks[${i}].z is ${String(l.z)}; it must be finite or null`);
  });
  const bounds = spendingBoundaries(fractions, opts);
  let firstCrossing: number | null = null;
  const results: LookResult[] = bounds.map((b, i) => {
    const ev = evaluateLook(looks[i].z, b.boundaryZ);
    if (ev.crossed && firstCrossing === null) firstCrossing = i;
    return { ...b, observedZ: looks[i].z, crossed: ev.crossed, direction: ev.direction };
  });
  return freezeDeep({
    method: `Lan–DeMets alpha spending (${opts.spending === 'pocock' ? 'Pocock' : "O'Brien–Fleming"} type), symmetric two-sided boundaries by recursive numerical integration`,
    spending: opts.spending,
    alpha: opts.alpha,
    looks: results,
    firstCrossing,
  });
}

// ---------------------------------------------------------------------------------------------------------
// Anytime-valid inference: asymptotic confidence sequence (Waudby-Smith et al. 2021)
// ---------------------------------------------------------------------------------------------------------

export interface TwoSampleMoments {
  na: number;
  meanA: number;
  /** Sample variance of a (denominator n − 1). */
  varA: number;
  nb: number;
  meanB: number;
  varB: number;
}

export interface AnytimeValidResult {
  method: string;
  /** Anytime-valid p-value for H0: mean a = mean b (two-sided). */
  p: number | null;
  /** Level 1 − α confidence sequence for mean a − mean b at this moment. */
  ci: Interval;
  /** Mixing parameter ρ of the Gaussian mixture (standardised scale, per answer pair). */
  mixing: number;
  /** Target time t* (answers per condition) at which the sequence was tuned to be tightest. */
  targetPerCondition: number;
  /** Mean a − mean b. */
  estimate: number | null;
  reason?: string;
}

/** Target per condition when the experiment declares no planned size. */
export const DEFAULT_TARGET_PER_CONDITION = 500;

/** ρ of Waudby-Smith et al. (2021) that makes the two-sided sequence tightest near time t*. O(1). */
export function mixingForTarget(alpha: number, target: number): number {
  checkAlpha(alpha);
  if (!Number.isFinite(target) || !(target > 0)) throw new RangeError(`target is ${String(target)}; it must be a finite number > 0`);
  const l = -2 * Math.log(alpha);
  return Math.sqrt((l + Math.log(1 + l)) / target);
}

function checkCount(n: number, name: string): void {
  if (typeof n !== 'number' || !Number.isInteger(n) || n < 0) throw new RangeError(`${name} is ${String(n)}; it must be a whole number ≥ 0`);
}
function checkFiniteOrNull(x: number, name: string, nonNegative = false): void {
  if (typeof x !== 'number' || !Number.isFinite(x) || (nonNegative && x < 0)) {
    throw new RangeError(`${name} is ${String(x)}; it must be a finite number${nonNegative ? ' ≥ 0' : ''}`);
  }
}

/**
 * Anytime-valid p-value and confidence sequence for mean a − mean b from the running moments of each group.
 * Valid however often it is checked (asymptotically). O(1).
 */
export function anytimeValid(stats: TwoSampleMoments, opts: { alpha: number; plannedPerCondition?: number | null }): AnytimeValidResult {
  checkAlpha(opts.alpha);
  checkCount(stats.na, 'na');
  checkCount(stats.nb, 'nb');
  const planned = opts.plannedPerCondition ?? null;
  if (planned !== null && (typeof planned !== 'number' || !Number.isFinite(planned) || !(planned > 0))) {
    throw new RangeError(`plannedPerCondition is ${String(planned)}; it must be a finite number > 0 or null`);
  }
  const alpha = opts.alpha;
  const target = planned ?? DEFAULT_TARGET_PER_CONDITION;
  const rho = mixingForTarget(alpha, target);
  const method =
    'asymptotic confidence sequence of normal-mixture type (Robbins 1970; Howard et al. 2021; Waudby-Smith et al. 2024) for the difference in means';
  const level = 1 - alpha;
  const base = { method, mixing: rho, targetPerCondition: target };
  const undefinedResult = (reason: string, estimate: number | null): AnytimeValidResult =>
    freezeDeep({ ...base, p: null, ci: { level, lower: null, upper: null, reason }, estimate, reason });

  if (stats.na < 2 || stats.nb < 2) {
    return undefinedResult('Each group needs at least two answers before the variance, and so the sequence, can be estimated.', null);
  }
  checkFiniteOrNull(stats.meanA, 'meanA');
  checkFiniteOrNull(stats.meanB, 'meanB');
  checkFiniteOrNull(stats.varA, 'varA', true);
  checkFiniteOrNull(stats.varB, 'varB', true);
  const estimate = stats.meanA - stats.meanB;
  const v = stats.varA / stats.na + stats.varB / stats.nb;
  if (!(v > 0) || !Number.isFinite(v)) {
    return undefinedResult('Both groups have zero variance, so the uncertainty of the difference cannot be estimated.', estimate);
  }
  const tEff = (stats.varA + stats.varB) / v;
  const x = rho * rho * tEff;
  const logTerm = Math.log1p(x) - 2 * Math.log(alpha);
  const half = Math.sqrt(v * ((x + 1) / x) * logTerm);
  const z = estimate / Math.sqrt(v);
  // log of 1/Λ: ½ ln(1 + x) − x z² / (2 (1 + x)); p = min(1, exp(·)).
  const logP = 0.5 * Math.log1p(x) - (x * z * z) / (2 * (1 + x));
  const p = logP >= 0 ? 1 : Math.exp(logP);
  return freezeDeep({
    ...base,
    p,
    ci: { level, lower: estimate - half, upper: estimate + half },
    estimate,
  });
}
