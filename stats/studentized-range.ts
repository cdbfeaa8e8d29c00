/**
 * studentized-range.ts — the distribution of the studentized range Q (Tukey), for the p-values of the
 * Games–Howell pairwise comparisons.
 *
 * What it computes
 *   studentizedRangeUpperTail(q, k, ν) = P(Q > q), computed directly (never as 1 − cdf), and
 *   studentizedRangeCdf(q, k, ν)       = P(Q ≤ q), computed directly,
 * where Q = R / s, R the range of k independent standard normal variables and s an independent
 * √(χ²_ν / ν) (ν = Infinity: s = 1, Q is the range itself). k ≥ 2 (whole number), ν > 0 (R's ptukey
 * accepts ν ≥ 2 only; the definition below holds for every ν > 0).
 *
 * Method (the published definition; no program's code was followed)
 *   Range of k normals (Hartley 1942; Tukey's formulation): with φ, Φ the standard normal density and cdf,
 *     W_k(w) = P(R ≤ w) = k ∫ φ(z) [Φ(z) − Φ(z − w)]^(k−1) dz        (z over the real line).
 *   Its upper tail is written without the subtraction 1 − W_k: since k ∫ φ(z) Φ(z)^(k−1) dz = 1,
 *     1 − W_k(w) = k ∫ φ(z) { A^(k−1) − C^(k−1) } dz,  A = Φ(z), B = Φ(z − w), C = A − B,
 *   and A^(k−1) − C^(k−1) = B · Σ_{j=0}^{k−2} A^j C^(k−2−j) (all terms ≥ 0: no cancellation). C is formed
 *   from whichever normal tails are small (Q(z − w) − Q(z) when z ≥ w), so tails down to ~1e-300 keep
 *   their digits. The integrand of the tail lives on [w/2 − 9, w/2 + 9] (outside it the integrand is below
 *   e^-81 · e^(-w²/4), while the tail itself is above 2Φ(−w/√2)); the cdf's on [−8.5, w + 8.5].
 *   Studentized range (Hartley 1942; Copenhaver & Holland 1988, eq. for P(Q ≤ q)):
 *     P(Q ≤ q) = ∫₀^∞ f_ν(s) W_k(q·s) ds,  P(Q > q) = ∫₀^∞ f_ν(s) [1 − W_k(q·s)] ds,
 *   with f_ν the density of s = √(χ²_ν/ν). The outer integral is taken over u = ln s, where the density is
 *     h(u) = √(ν/π) · exp(−δ(ν/2) − (ν/2)(e^(2u) − 1 − 2u))      (δ the Stirling correction of lnΓ),
 *   a form whose normalising constant is exact for any ν (the same representation as the noncentral t in
 *   distributions.ts). The range of u is cut where h falls e^-50 (left) or e^-40 (right) below its peak.
 *   The inner integrals: composite 20-point Gauss–Legendre (nodes from Newton's method on the Legendre
 *   recurrence) on panels no wider than 4.5 (tail) or 1.5 (cdf), cut at 0, w/2 and w — the integrands are
 *   smooth bell-shaped functions, on which this rule is accurate to ~1e-15. The outer integral: the project's
 *   adaptive Gauss–Kronrod 7/15 (distributions.ts, integrateAdaptive, QUADPACK's pessimistic error estimate)
 *   to relative 1e-8, with break points at the mode of h, ±2 and ±4 of its widths σ = 1/√(2ν), where
 *   q·s = 1, 4, 8, and at thirds of the range.
 * Accuracy: against the definition integrated independently by R's integrate() (QUADPACK QAGS at 1e-13) over
 *   k = 2 … 10, ν = 2 … 1000 and ∞, upper tails from 0.9 down to 1e-12 (tests/fixtures/r-ptukey.json), and
 *   against R's ptukey where ptukey is itself accurate (its far upper tail at small ν is far off: P(Q > 1000;
 *   10, 2) = 1.9e-13 by ptukey, 1.01e-5 by the definition and by simulation). The test states the worst error.

 * References
 *   Hartley, H. O. (1942). The range in random samples. Biometrika 32(3/4), 334–348. doi:10.2307/2332137
 *   Tukey, J. W. (1953). The problem of multiple comparisons. Unpublished manuscript (the studentized range).
 *   Copenhaver, M. D. & Holland, B. (1988). Computation of the distribution of the maximum studentized range
 *     statistic with application to multiple significance testing of simple effects. Journal of Statistical
 *     Computation and Simulation 30(1), 1–15. doi:10.1080/00949658808811082
 *   Piessens, R. et al. (1983). QUADPACK. Springer (Gauss–Kronrod 7/15 and its error estimate).
 *
 * Cost: the inner integral is O(k) work at each of ≤ 20·⌈18/4.5 + 3⌉ = 140 nodes (tail; the cdf ≤ 20·⌈(w + 17)/1.5
 *   + 3⌉ nodes, w ≤ q·e^(uHi)); the outer evaluates it at 15 nodes per panel, ≤ OUTER_PANELS = 400 panels
 *   (typically 10–30). So O(400 · 15 · 140 · k) at worst, bounded whatever q, k, ν; typically 10–30 ms per tail
 *   on the project's 2-core machine.
 */
import {
  expm1MinusLinear,
  integrateAdaptive,
  normalCdf,
  normalDensity,
  normalUpperTail,
  stirlingCorrection,
} from './distributions.js';

const LN_PI = 1.1447298858494001741434273513531;
const OUTER_TOL = 1e-8;
const OUTER_PANELS = 400;
// The outer range is cut where h falls e^-LEFT_CUT (left) and e^-RIGHT_CUT (right) below its peak: the mass
// left out is below 2e-22 on the left (where 1 − W_k is near 1) and 4e-18 · (1 − W_k) on the right.
const LEFT_CUT = 50;
const RIGHT_CUT = 40;

function checkArgs(q: number, k: number, df: number): void {
  if (typeof q !== 'number' || Number.isNaN(q)) throw new RangeError(`q is ${String(q)}; a number was expected`);
  if (typeof k !== 'number' || !Number.isInteger(k) || k < 2) {
    throw new RangeError(`k is ${String(k)}; the number of means must be a whole number ≥ 2`);
  }
  if (typeof df !== 'number' || !(df > 0)) throw new RangeError(`df is ${String(df)}; degrees of freedom must be > 0`);
}

/** Φ(z) − Φ(z − w) for w ≥ 0, from whichever tails are small. */
function rangeProbability(z: number, w: number): number {
  const lo = z - w;
  if (lo >= 0) return normalUpperTail(lo) - normalUpperTail(z);
  if (z <= 0) return normalCdf(z) - normalCdf(lo);
  return 1 - normalUpperTail(z) - normalCdf(lo);
}

function sortedBreaks(points: number[], lo: number, hi: number): number[] {
  const inside = points.filter((p) => p > lo && p < hi);
  return [lo, ...inside, hi].sort((x, y) => x - y).filter((p, i, arr) => i === 0 || p > arr[i - 1]);
}

// Gauss–Legendre nodes and weights on [−1, 1] (20 points), from the roots of the Legendre polynomial P_20 by
// Newton's method on the three-term recurrence (Abramowitz & Stegun 1964, 25.4.29; Golub & Welsch 1969).
const GL_POINTS = 20;
const GL_X: number[] = [];
const GL_W: number[] = [];
(() => {
  const n = GL_POINTS;
  for (let i = 1; i <= n; i++) {
    let x = Math.cos((Math.PI * (i - 0.25)) / (n + 0.5));
    let derivative = 1;
    for (let iter = 0; iter < 100; iter++) {
      let p0 = 1;
      let p1 = x;
      for (let j = 2; j <= n; j++) {
        const p2 = ((2 * j - 1) * x * p1 - (j - 1) * p0) / j;
        p0 = p1;
        p1 = p2;
      }
      derivative = (n * (x * p1 - p0)) / (x * x - 1);
      const dx = p1 / derivative;
      x -= dx;
      if (Math.abs(dx) < 1e-16) break;
    }
    GL_X.push(x);
    GL_W.push(2 / ((1 - x * x) * derivative * derivative));
  }
})();

/** Composite 20-point Gauss–Legendre over [lo, hi] cut at `breaks` and into panels no wider than `width`. */
function gaussLegendre(f: (z: number) => number, lo: number, hi: number, breaks: number[], width: number): number {
  const cuts = sortedBreaks(breaks, lo, hi);
  let total = 0;
  for (let i = 0; i + 1 < cuts.length; i++) {
    const pieces = Math.max(1, Math.ceil((cuts[i + 1] - cuts[i]) / width));
    const step = (cuts[i + 1] - cuts[i]) / pieces;
    for (let p = 0; p < pieces; p++) {
      const center = cuts[i] + (p + 0.5) * step;
      const half = step / 2;
      let sum = 0;
      for (let j = 0; j < GL_POINTS; j++) sum += GL_W[j] * f(center + half * GL_X[j]);
      total += sum * half;
    }
  }
  return total;
}

/** P(R > w) for the range R of k standard normals, computed directly. O(k · 200) work. */
export function rangeUpperTail(w: number, k: number): number {
  if (!(w > 0)) return 1;
  if (w > 80) return 0; // below e^-1600
  const km1 = k - 1;
  const integrand = (z: number): number => {
    const lo = z - w;
    const upperZ = normalUpperTail(z);
    const a = z > 0 ? 1 - upperZ : normalCdf(z);
    const b = normalCdf(lo);
    if (b === 0) return 0;
    const c = lo >= 0 ? normalUpperTail(lo) - upperZ : z <= 0 ? a - b : 1 - upperZ - b;
    // Σ_{j=0}^{k−2} A^j C^(k−2−j), by Horner in A: ((A + C)·A + C²)·… written as a running sum
    let sum = 0;
    let cPower = 1;
    for (let j = 0; j < km1; j++) {
      sum = sum * a + cPower;
      cPower *= c;
    }
    // the loop above builds Σ_j A^(k−2−j) C^j, the same sum
    return normalDensity(z) * b * sum;
  };
  const mid = w / 2;
  const value = k * gaussLegendre(integrand, mid - 9, mid + 9, [0, w, mid], 4.5);
  return Math.min(1, Math.max(0, value));
}

/** P(R ≤ w) for the range R of k standard normals, computed directly. O(k · 20 · (w + 17)/1.5) work. */
export function rangeCdf(w: number, k: number): number {
  if (!(w > 0)) return 0;
  if (w === Infinity) return 1;
  const km1 = k - 1;
  const integrand = (z: number): number => {
    const c = rangeProbability(z, w);
    return c > 0 ? normalDensity(z) * c ** km1 : 0;
  };
  const hi = Math.min(w + 8.5, 8.5 + Math.max(w / 2, 0) + 9);
  const value = k * gaussLegendre(integrand, -8.5, Math.max(hi, 8.5), [0, w / 2, w], 1.5);
  return Math.min(1, Math.max(0, value));
}

/** u where (ν/2)(e^(2u) − 1 − 2u) = level, on the side of `start` (Newton from outside; monotone). */
function densityCut(df: number, level: number, start: number): number {
  const target = (2 * level) / df;
  let u = start;
  for (let i = 0; i < 200; i++) {
    const step = (expm1MinusLinear(u) - target) / (2 * Math.expm1(2 * u));
    if (!Number.isFinite(step) || Math.abs(step) <= 1e-12 * Math.max(1, Math.abs(u))) break;
    u -= step;
  }
  return u;
}

function mixture(q: number, k: number, df: number, inner: (w: number, k: number) => number): number {
  const half = df / 2;
  const logConst = 0.5 * (Math.log(df) - LN_PI) - stirlingCorrection(half);
  const e = (level: number) => (2 * level) / df;
  const leftStart = -(e(LEFT_CUT) / 2 + 1) - Math.sqrt(e(LEFT_CUT) / 2);
  const rightStart = Math.sqrt(e(RIGHT_CUT) / 2) + 0.5 * Math.log1p(e(RIGHT_CUT));
  const uLo = densityCut(df, LEFT_CUT, leftStart) * 1.000001;
  const uHi = densityCut(df, RIGHT_CUT, rightStart) * 1.000001;
  const sigma = 1 / Math.sqrt(2 * df);
  const points: number[] = [];
  for (let i = 1; i < 3; i++) points.push(uLo + ((uHi - uLo) * i) / 3);
  for (const m of [-4, -2, 0, 2, 4]) points.push(m * sigma);
  for (const w of [1, 4, 8]) points.push(Math.log(w / q));
  const breaks = sortedBreaks(points, uLo, uHi);
  const integrand = (u: number): number => {
    const density = Math.exp(logConst - half * expm1MinusLinear(u));
    if (density === 0) return 0;
    return density * inner(q * Math.exp(u), k);
  };
  return integrateAdaptive(integrand, breaks, OUTER_TOL, OUTER_PANELS);
}

/**
 * P(Q > q) for the studentized range of k means with df degrees of freedom (df = Infinity allowed),
 * computed directly so that small tails keep their precision. Compare R's ptukey(q, k, df, lower = FALSE).
 */
export function studentizedRangeUpperTail(q: number, k: number, df: number): number {
  checkArgs(q, k, df);
  if (!(q > 0)) return 1;
  if (q === Infinity) return 0;
  if (df === Infinity) return rangeUpperTail(q, k);
  return Math.min(1, Math.max(0, mixture(q, k, df, rangeUpperTail)));
}

/** P(Q ≤ q) for the studentized range, computed directly (accurate when it is small). R's ptukey(q, k, df). */
export function studentizedRangeCdf(q: number, k: number, df: number): number {
  checkArgs(q, k, df);
  if (!(q > 0)) return 0;
  if (q === Infinity) return 1;
  if (df === Infinity) return rangeCdf(q, k);
  return Math.min(1, Math.max(0, mixture(q, k, df, rangeCdf)));
}
