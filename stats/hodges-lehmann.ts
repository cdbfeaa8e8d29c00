/**
 * Hodges–Lehmann estimate of the shift between two samples, with its confidence interval, and the
 * weighted selection of order statistics of the pairwise differences that both rest on.
 *
 * What it computes: the median of all n_a·n_b pairwise differences a_i − b_j (pinned definition: for an
 * even number N = n_a·n_b of differences, the mean of the order statistics D_(N/2) and D_(N/2+1); this
 * is what R's median(outer(a, b, "-")) gives, and what wilcox.test reports as the "difference in
 * location" under its exact method). D_(k) is the k-th smallest difference (1-based, counted with
 * multiplicity). The interval inverts the rank-sum test: the set of shifts Δ for which the test of
 * a − Δ against b does not reject.
 *
 * Alternatives: "two-sided" gives [lower, upper]; "greater" (a shifted up) gives [lower, ∞) with
 * `upper` null; "less" gives (−∞, upper] with `lower` null. Each bound uses the one-sided level α
 * (two-sided: α/2 on each side), α = 1 − confidenceLevel.
 *
 * Method for the interval, by the method rank-sum.ts chose for the same data and `exact` option:
 *  - exact, no ties (as R's wilcox.test(exact = TRUE, conf.int = TRUE)): qu = the α/2 quantile of U under
 *    its exact null distribution, the smallest u with P(U ≤ u) ≥ α/2 (one-sided: the α quantile), compared
 *    with a slack of 128ε relative + ε/2 absolute for rounding (exactLowerQuantile; the values equal R's
 *    qwilcox(α/2, n_a, n_b)); qu := 1 if it is 0; lower = D_(qu), upper = D_(N − qu + 1) (Bauer 1972).
 *    achievedLevel = 1 − 2·P(U ≤ qu − 1) (one-sided 1 − P(U ≤ qu − 1)), the exact coverage. R prints the
 *    requested level unless that coverage falls short by more than α/2 (then it prints 1 − achieved α);
 *    we always report the exact coverage.
 *  - exact, with ties (results as coin::wilcox_test(distribution = "exact", conf.int = TRUE)): with the
 *    exact conditional null distribution of U, Uq_lo = its α/2 quantile and Uq_hi its 1 − α/2 quantile,
 *    each the smallest support point u with P(U ≤ u) ≥ p, up to the same rounding slack as above
 *    (exactLowerQuantile, one rule for both paths). Where P(U ≤ u) falls just below p (by 9e-10 in the
 *    regression test "cumulative probability just below α"), coin takes u itself, so its interval can be
 *    one order statistic narrower than ours, with a coverage a hair below the level (R coin 1.4-2 run as
 *    a black box; such near-misses were found in 3 of 144,000 random tied data sets); ours keeps
 *    achievedLevel ≥ level.
 *    lower = D_(N − ⌊Uq_hi⌋), upper = D_(N − ⌈Uq_lo⌉ + 1) (null when that index exceeds N: coin returns
 *    +∞ there), both null when Uq_hi > N − #(D = D_(1)) (coin cannot compute the interval then).
 *    One-sided: the two-sided interval at level 1 − 2α, keeping one side (as coin's one-sided intervals
 *    are). achievedLevel = P(Uq_lo ≤ U ≤ Uq_hi)
 *    under that distribution (one-sided P(U ≤ Uq_hi) or P(U ≥ Uq_lo)): the null probability of the
 *    acceptance region the interval inverts.
 *  - normal: k = ⌊N/2 − z·√V⌋, z = Φ⁻¹(1 − α/2) (one-sided Φ⁻¹(1 − α)), V the tie-corrected variance
 *    of U; lower = D_(k), upper = D_(N + 1 − k); bounds null when k < 1. achievedLevel is the normal
 *    approximation (with continuity correction) of the coverage of that k, i.e. of P(k ≤ U ≤ N − k):
 *      two-sided 1 − 2·Q((N/2 − k + ½)/√V),  one-sided 1 − Q((N/2 − k + ½)/√V),   Q the normal upper tail.
 *
 * Selection of D_(k) without materialising the N differences (Johnson & Mizoguchi 1978; Monahan 1984,
 * ACM TOMS Algorithm 616, extended to weights): rows are the distinct values of a with their counts,
 * columns the distinct values of b (in decreasing order) with theirs, so the implicit matrix
 * a_i − b_j is sorted along rows and columns. Each row keeps an active column range [L_i, R_i): cells
 * left of L_i are known to be at or below a value `low` < D_(k), cells from R_i on at or above a value
 * `high` > D_(k). A round picks two pivots low < p1 ≤ p2 < high, counts the weighted number of
 * differences < and ≤ each with one monotone walk over the rows (four pointers that only move left;
 * cumulative column weights make a row's count O(1) once its boundary is found), and keeps the part
 * that still holds D_(k); the answer is a pivot p with #(D < p) < k ≤ #(D ≤ p), or is picked by a
 * weighted quickselect once the active cells are no more than max(256, active rows). Pivot rules:
 *   - first round: two order statistics, bracketing the target rank, of a weighted random sample of
 *     the active cells (Floyd & Rivest 1975; a fixed-seed generator, so runs repeat);
 *   - then interpolation between low and high (the count of differences ≤ v is smooth in v for
 *     continuous data, so a secant step with a guard band, sized from the previous step's miss, lands
 *     very close: at 10^6 × 10^6 distinct values three walks take 10^12 active cells to about 10^4);
 *   - when a round fails to halve the active cells: sampling again, and after a poor sampling round
 *     Johnson–Mizoguchi's weighted median of the row medians, which removes at least a quarter of them.
 * Rows whose range empties are compacted away. With few distinct values (integer items) the rank range
 * of the median's value is recorded, and interval bounds that share that value cost no selection; with
 * many, the median's first-round bracket is kept, with every pivot its selection counted inside it
 * (knots: v, #(D < v), #(D ≤ v)) and the miss of its first secant step. Each interval bound then starts
 * from that bracket (no sampling walk) and its first secant runs between the two knots nearest its rank,
 * with a band of 3·miss·(span/span₀)² (a secant's error grows with the square of its span); a knot that
 * holds the rank answers it with no walk. With unit weights (all values distinct) the walk skips the
 * weight arithmetic (cy[c] = c), giving the same integer sums.
 * References:
 *   Hodges, J. L. & Lehmann, E. L. (1963). Estimates of location based on rank tests. Ann. Math.
 *     Statist. 34(2), 598–611. doi:10.1214/aoms/1177704172
 *   Bauer, D. F. (1972). Constructing confidence sets using rank statistics. JASA 67(339), 687–690.
 *     doi:10.1080/01621459.1972.10481279
 *   Johnson, D. B. & Mizoguchi, T. (1978). Selecting the Kth element in X + Y and X1 + X2 + … + Xm.
 *     SIAM J. Comput. 7(2), 147–153. doi:10.1137/0207013
 *   Monahan, J. F. (1984). Algorithm 616: fast computation of the Hodges–Lehmann location estimator.
 *     ACM TOMS 10(3), 265–270. doi:10.1145/1271.319414
 *   Floyd, R. W. & Rivest, R. L. (1975). Expected time bounds for selection. CACM 18(3), 165–172.
 *     doi:10.1145/360680.360691
 *   R 4.2.2 stats::wilcox.test.default (exact interval); coin 1.4-2 confint for wilcox_test.
 *
 * Cost: each selection O((K_a + K_b)·log(K_a·K_b)) time in the worst case (every second round removes
 * at least a quarter of the active cells); O(K_a + K_b) memory; K the number of distinct values. In
 * practice the estimate takes 3 walks of O(K_a + K_b) and a gathering of the last few cells, and each
 * interval bound 1 walk and a gathering (at 10^6 × 10^6 distinct values: 5 walks in all, was 8 before
 * the knots). The interval adds the cost of rank-sum.ts's method choice (an exact distribution only for
 * small samples).
 */
import { normalQuantile, normalUpperTail } from './distributions.js';
import { analyseRankSum, exactCdf, exactSf, type ExactRankSumDistribution, type RankSumAnalysis } from './rank-sum.js';
import type { Sample } from './sample.js';
import { freezeDeep, type Alternative, type ExactMode, type HodgesLehmannResult } from './types.js';

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];
const ENUM_LIMIT = 256;
const SAMPLE_MAX = 16384;
const SAMPLE_MIN = 48;

// ---------------------------------------------------------------------------------------------------
// The implicit sorted matrix of differences
// ---------------------------------------------------------------------------------------------------

interface DifferenceMatrix {
  /** Row values: distinct values of a, increasing. */
  x: Float64Array;
  /** Row weights: counts of a. */
  wx: Float64Array;
  /** cx[i] = wx[0] + … + wx[i − 1]; length K_a + 1. */
  cx: Float64Array;
  /** Column values: the negated distinct values of b, increasing (so x_i + y_c = a_i − b_j). */
  y: Float64Array;
  /** Column weights. */
  wy: Float64Array;
  /** cy[c] = wy[0] + … + wy[c − 1]; length K_b + 1. */
  cy: Float64Array;
  unitX: boolean;
  unitY: boolean;
  total: number;
  /** Scratch arrays reused by every selection on this matrix (allocated on first use). */
  work: Workspace | null;
}

function differenceMatrix(a: Sample, b: Sample): DifferenceMatrix {
  const ka = a.values.length;
  const kb = b.values.length;
  const y = new Float64Array(kb);
  const wy = new Float64Array(kb);
  const cy = new Float64Array(kb + 1);
  let unitY = true;
  for (let c = 0; c < kb; c++) {
    y[c] = -b.values[kb - 1 - c];
    wy[c] = b.counts[kb - 1 - c];
    if (wy[c] !== 1) unitY = false;
    cy[c + 1] = cy[c] + wy[c];
  }
  const cx = new Float64Array(ka + 1);
  let unitX = true;
  for (let i = 0; i < ka; i++) {
    if (a.counts[i] !== 1) unitX = false;
    cx[i + 1] = cx[i] + a.counts[i];
  }
  return { x: a.values, wx: a.counts, cx, y, wy, cy, unitX, unitY, total: a.n * b.n, work: null };
}

interface Workspace {
  xr: Float64Array;
  wr: Float64Array;
  cum: Float64Array;
  /** Buffers for the sample and for the gathered cells (capacity ≥ what a selection can ask for). */
  sample: Float64Array;
  vals: Float64Array;
  wts: Float64Array;
  L: Int32Array;
  R: Int32Array;
  sL: Int32Array;
  sR: Int32Array;
}

/** The scratch arrays of a matrix, carved out of one buffer (typed-array allocations are not free). */
function workspace(mat: DifferenceMatrix): Workspace {
  if (mat.work === null) {
    const ka = mat.x.length;
    const kb = mat.y.length;
    const sampleCap = Math.min(SAMPLE_MAX, ka + kb);
    const enumCap = Math.max(ENUM_LIMIT, ka);
    const doubles = 3 * ka + sampleCap + 2 * enumCap;
    const buffer = new ArrayBuffer(8 * doubles + 4 * 4 * ka);
    let at = 0;
    const f64 = (len: number): Float64Array => {
      const view = new Float64Array(buffer, at, len);
      at += 8 * len;
      return view;
    };
    const i32 = (len: number): Int32Array => {
      const view = new Int32Array(buffer, at, len);
      at += 4 * len;
      return view;
    };
    mat.work = {
      xr: f64(ka),
      wr: f64(ka),
      cum: f64(ka),
      sample: f64(sampleCap),
      vals: f64(enumCap),
      wts: f64(enumCap),
      L: i32(ka),
      R: i32(ka),
      sL: i32(ka),
      sR: i32(ka),
    };
  }
  return mat.work;
}

/** A fixed-seed 32-bit generator (mulberry32), returning doubles in [0, 1) with 53 random bits. */
function makeRandom(seed: number): () => number {
  let state = seed >>> 0;
  const next32 = (): number => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (t ^ (t >>> 14)) >>> 0;
  };
  return () => ((next32() >>> 5) * 67108864 + (next32() >>> 6)) / 9007199254740992;
}

/**
 * Weighted selection among n (value, weight) pairs held in vals/wts (both reordered in place): the
 * value v with Σ w(< v) < r ≤ Σ w(≤ v). Quickselect with three-way partitioning, O(n) expected.
 */
function weightedSelect(vals: Float64Array, wts: Float64Array, n: number, r: number): number {
  let lo = 0;
  let hi = n; // [lo, hi)
  let seed = 0x9e3779b9;
  for (;;) {
    if (hi - lo === 1) return vals[lo];
    // pivot: median of three pseudo-random positions
    seed = (Math.imul(seed, 1664525) + 1013904223) >>> 0;
    const span = hi - lo;
    const p1 = vals[lo + (seed % span)];
    const p2 = vals[lo + ((seed >>> 11) % span)];
    const p3 = vals[lo + ((seed >>> 21) % span)];
    const pivot = p1 < p2 ? (p2 < p3 ? p2 : p1 < p3 ? p3 : p1) : p1 < p3 ? p1 : p2 < p3 ? p3 : p2;
    // Dutch national flag: [lo, lt) < pivot, [lt, i) = pivot, (gt, hi) > pivot
    let lt = lo;
    let i = lo;
    let gt = hi - 1;
    let wLess = 0;
    let wEq = 0;
    while (i <= gt) {
      const v = vals[i];
      if (v < pivot) {
        wLess += wts[i];
        swap(vals, wts, lt++, i++);
      } else if (v > pivot) {
        swap(vals, wts, i, gt--);
      } else {
        wEq += wts[i];
        i++;
      }
    }
    if (r <= wLess) {
      hi = lt;
    } else if (r <= wLess + wEq) {
      return pivot;
    } else {
      r -= wLess + wEq;
      lo = gt + 1;
    }
  }
}

function swap(vals: Float64Array, wts: Float64Array, i: number, j: number): void {
  const v = vals[i];
  vals[i] = vals[j];
  vals[j] = v;
  const w = wts[i];
  wts[i] = wts[j];
  wts[j] = w;
}

/** Index of the first column c in [from, to) with cy[c + 1] > target (cumulative weights). */
function columnAt(cy: Float64Array, from: number, to: number, target: number): number {
  let lo = from;
  let hi = to - 1;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (cy[mid + 1] > target) hi = mid;
    else lo = mid + 1;
  }
  return lo;
}

/**
 * Weighted numbers of differences < v and ≤ v (all rows), and the smallest difference > v (Infinity if
 * none). One monotone walk, O(K_a + K_b).
 */
function countAtMost(mat: DifferenceMatrix, v: number): { below: number; count: number; next: number } {
  const { x, wx, y, cy } = mat;
  const kb = y.length;
  let le = kb;
  let lt = kb;
  let count = 0;
  let below = 0;
  let next = Infinity;
  for (let i = 0; i < x.length; i++) {
    const xi = x[i];
    while (le > 0 && xi + y[le - 1] > v) le--;
    if (lt > le) lt = le;
    while (lt > 0 && xi + y[lt - 1] >= v) lt--;
    count += wx[i] * cy[le];
    below += wx[i] * cy[lt];
    if (le < kb) {
      const cand = xi + y[le];
      if (cand < next) next = cand;
    }
  }
  return { below, count, next };
}

/** Working state of one selection. Rows are the distinct values of a, in increasing order. */
interface Selection {
  /** Number of rows in the working arrays (rows whose range emptied stay until the next compaction). */
  n: number;
  /** Row values and weights: the matrix's own arrays until the first compaction, then compacted copies. */
  xr: Float64Array;
  wr: Float64Array;
  compacted: boolean;
  /** Active column range [L, R) of each row. */
  L: Int32Array;
  R: Int32Array;
  /** Scratch written by a counting walk: the first column > p1 (candidate L) and ≥ p2 (candidate R). */
  sL: Int32Array;
  sR: Int32Array;
  /** Σ L and Σ R over the rows, so that the number of active cells is sumR − sumL. */
  sumL: number;
  sumR: number;
  /** Weight of all cells left of L (known to lie below the answer), dropped rows included. */
  wLeft: number;
  /** Weight of all cells left of R (the active weight is wBelowHigh − wLeft). */
  wBelowHigh: number;
  /** Weight left of L in rows removed by compaction. */
  wDropped: number;
  /** Bracketing values: every cell left of L is ≤ low, every cell from R on is ≥ high. */
  low: number;
  high: number;
  /** No round yet: every row spans all columns. */
  fresh: boolean;
  /** Sampling table: cum[t] = active weight of rows 0 … t; valid only when cumValid. */
  cum: Float64Array;
  cumValid: boolean;
}

interface WalkResult {
  wlt1: number;
  wle1: number;
  wlt2: number;
  wle2: number;
  /** Σ over rows of the first column > p1, and of the first column ≥ p2. */
  sle1: number;
  slt2: number;
}

/**
 * A bracket kept from an earlier selection on the same matrix (its first round): row ranges and the
 * counts and values that bound them. A later selection whose rank falls inside starts from it.
 */
interface Bracket {
  L: Int32Array;
  R: Int32Array;
  sumL: number;
  sumR: number;
  wLeft: number;
  wBelowHigh: number;
  low: number;
  high: number;
  /** How far the first interpolation inside this bracket missed its predicted rank (weight), once known. */
  miss: number | null;
  /** The value span (high − low) over which that interpolation was made. */
  missSpan: number;
  /** Every pivot counted inside this bracket by the selection that kept it, with its exact counts. */
  knots: Knot[];
}

/** A pivot value v with the exact weighted counts #(D < v) and #(D ≤ v). */
interface Knot {
  v: number;
  lt: number;
  le: number;
}

function startSelection(mat: DifferenceMatrix, from: Bracket | null = null): Selection {
  const ws = workspace(mat);
  const ka = mat.x.length;
  const kb = mat.y.length;
  if (from !== null) {
    ws.L.set(from.L);
    ws.R.set(from.R);
  } else {
    ws.L.fill(0);
    ws.R.fill(kb);
  }
  const sel: Selection = {
    n: ka,
    xr: mat.x,
    wr: mat.wx,
    compacted: false,
    L: ws.L,
    R: ws.R,
    sL: ws.sL,
    sR: ws.sR,
    sumL: 0,
    sumR: ka * kb,
    wLeft: 0,
    wBelowHigh: mat.total,
    wDropped: 0,
    low: -Infinity,
    high: Infinity,
    fresh: true,
    cum: ws.cum,
    cumValid: false,
  };
  if (from !== null) {
    sel.sumL = from.sumL;
    sel.sumR = from.sumR;
    sel.wLeft = from.wLeft;
    sel.wBelowHigh = from.wBelowHigh;
    sel.low = from.low;
    sel.high = from.high;
    sel.fresh = false;
  }
  return sel;
}

/**
 * One monotone walk over the rows counting, for pivots low < p1 ≤ p2 < high, the weight of the cells
 * < and ≤ each (every boundary then lies within [L, R]). The boundaries are non-increasing from row to
 * row, so each of the four pointers only moves left: O(rows + moves). Stores per row the boundaries a
 * round keeps when the answer lies between p1 and p2 (first column > p1, first column ≥ p2).
 */
function countWalk(sel: Selection, mat: DifferenceMatrix, p1: number, p2: number, out: WalkResult): void {
  if (mat.unitX && mat.unitY) {
    countWalkUnit(sel, mat, p1, p2, out);
    return;
  }
  const { xr, wr, L, R, sL, sR, n } = sel;
  const { y, cy } = mat;
  const kb = y.length;
  let a1 = kb; // first column with value > p1
  let b1 = kb; // first column with value ≥ p1
  let a2 = kb;
  let b2 = kb;
  let wle1 = 0;
  let wlt1 = 0;
  let wle2 = 0;
  let wlt2 = 0;
  let sle1 = 0;
  let slt2 = 0;
  for (let t = 0; t < n; t++) {
    const li = L[t];
    const ri = R[t];
    const xi = xr[t];
    if (a2 > ri) a2 = ri;
    if (a2 < li) a2 = li;
    while (a2 > li && xi + y[a2 - 1] > p2) a2--;
    b2 = a2; // the cells equal to p2 end at a2: at most a tie or two to step over
    while (b2 > li && xi + y[b2 - 1] >= p2) b2--;
    if (a1 > a2) a1 = a2; // p1 ≤ p2: its boundaries lie at or left of p2's
    if (a1 < li) a1 = li;
    while (a1 > li && xi + y[a1 - 1] > p1) a1--;
    b1 = a1;
    while (b1 > li && xi + y[b1 - 1] >= p1) b1--;
    sL[t] = a1;
    sR[t] = b2;
    sle1 += a1;
    slt2 += b2;
    const w = wr[t];
    wle1 += w * cy[a1];
    wlt1 += w * cy[b1];
    wle2 += w * cy[a2];
    wlt2 += w * cy[b2];
  }
  const dropped = sel.wDropped;
  out.wlt1 = dropped + wlt1;
  out.wle1 = dropped + wle1;
  out.wlt2 = dropped + wlt2;
  out.wle2 = dropped + wle2;
  out.sle1 = sle1;
  out.slt2 = slt2;
}

/**
 * countWalk when every weight is 1 (all values distinct in both groups, the usual continuous case):
 * the cumulative column weight cy[c] is c itself and every row weight is 1, so the walk skips those
 * loads and multiplications. Same pointer moves, and the same sums of the same whole numbers in the
 * same order (exact in doubles), so the counts are identical to countWalk's.
 */
function countWalkUnit(sel: Selection, mat: DifferenceMatrix, p1: number, p2: number, out: WalkResult): void {
  const { xr, L, R, sL, sR, n } = sel;
  const y = mat.y;
  const kb = y.length;
  let a1 = kb;
  let b1 = kb;
  let a2 = kb;
  let b2 = kb;
  let wle1 = 0;
  let wlt1 = 0;
  let wle2 = 0;
  let wlt2 = 0;
  for (let t = 0; t < n; t++) {
    const li = L[t];
    const ri = R[t];
    const xi = xr[t];
    if (a2 > ri) a2 = ri;
    if (a2 < li) a2 = li;
    while (a2 > li && xi + y[a2 - 1] > p2) a2--;
    b2 = a2; // the cells equal to p2 end at a2: at most a tie or two to step over
    while (b2 > li && xi + y[b2 - 1] >= p2) b2--;
    if (a1 > a2) a1 = a2;
    if (a1 < li) a1 = li;
    while (a1 > li && xi + y[a1 - 1] > p1) a1--;
    b1 = a1;
    while (b1 > li && xi + y[b1 - 1] >= p1) b1--;
    sL[t] = a1;
    sR[t] = b2;
    wle1 += a1;
    wlt1 += b1;
    wle2 += a2;
    wlt2 += b2;
  }
  const dropped = sel.wDropped;
  out.wlt1 = dropped + wlt1;
  out.wle1 = dropped + wle1;
  out.wlt2 = dropped + wlt2;
  out.wle2 = dropped + wle2;
  // with unit weights the sums of the boundaries are the weights left of them
  out.sle1 = wle1;
  out.slt2 = wlt2;
}

/** Remove rows whose range is empty (their left weight moves to wDropped). O(rows). */
function compact(sel: Selection, mat: DifferenceMatrix): void {
  const { L, R, n } = sel;
  const { cy } = mat;
  const src = sel.xr;
  const srcW = sel.wr;
  if (!sel.compacted) {
    const ws = workspace(mat);
    sel.xr = ws.xr;
    sel.wr = ws.wr;
    sel.compacted = true;
  }
  const xr = sel.xr;
  const wr = sel.wr;
  let kept = 0;
  let dropped = sel.wDropped;
  let sumL = 0;
  let sumR = 0;
  for (let t = 0; t < n; t++) {
    const li = L[t];
    const ri = R[t];
    if (li < ri) {
      xr[kept] = src[t];
      wr[kept] = srcW[t];
      L[kept] = li;
      R[kept] = ri;
      sumL += li;
      sumR += ri;
      kept++;
    } else {
      dropped += srcW[t] * cy[li];
    }
  }
  sel.n = kept;
  sel.wDropped = dropped;
  sel.sumL = sumL;
  sel.sumR = sumR;
  sel.cumValid = false;
}

function buildCum(sel: Selection, mat: DifferenceMatrix): void {
  const { wr, L, R, cum, n } = sel;
  const { cy } = mat;
  let c = 0;
  for (let t = 0; t < n; t++) {
    c += wr[t] * (cy[R[t]] - cy[L[t]]);
    cum[t] = c;
  }
  sel.cumValid = true;
}

/** First index t in [0, n) with table[t + offset] > target (table non-decreasing). */
function firstAbove(table: Float64Array, n: number, target: number, offset = 0): number {
  let lo = 0;
  let hi = n - 1;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (table[mid + offset] > target) hi = mid;
    else lo = mid + 1;
  }
  return lo;
}

/** Two pivots bracketing the target rank r among the active cells, from a weighted random sample. */
function samplePivots(sel: Selection, mat: DifferenceMatrix, r: number, random: () => number): [number, number] {
  const { xr, wr, L, R, n } = sel;
  const { y, cy, cx, unitX, unitY } = mat;
  const kb = y.length;
  const positions = sel.sumR - sel.sumL;
  // Sample size: a round keeps about 5/√s of the active weight; s is capped so that drawing and
  // sorting the sample costs well under a counting walk over the rows.
  const s = Math.min(SAMPLE_MAX, n + kb, Math.max(SAMPLE_MIN, Math.ceil(Math.sqrt(positions))));
  const sample = workspace(mat).sample.subarray(0, s);
  if (sel.fresh) {
    // every row spans all columns: draw the row by a's weights and the column by b's
    const wa = cx[n];
    const wb = cy[kb];
    for (let q = 0; q < s; q++) {
      const t = unitX ? Math.min(n - 1, Math.floor(random() * n)) : firstAbove(cx, n, random() * wa, 1);
      const c = unitY ? Math.min(kb - 1, Math.floor(random() * kb)) : firstAbove(cy, kb, random() * wb, 1);
      sample[q] = xr[t] + y[c];
    }
  } else {
    if (!sel.cumValid) buildCum(sel, mat);
    const cum = sel.cum;
    const wAct = cum[n - 1];
    for (let q = 0; q < s; q++) {
      const target = random() * wAct;
      const t = firstAbove(cum, n, target);
      const off = (target - (t > 0 ? cum[t - 1] : 0)) / wr[t];
      let c = unitY ? L[t] + Math.floor(off) : columnAt(cy, L[t], R[t], cy[L[t]] + off);
      if (c >= R[t]) c = R[t] - 1;
      if (c < L[t]) c = L[t];
      sample[q] = xr[t] + y[c];
    }
  }
  sample.sort();
  const frac = r / (sel.wBelowHigh - sel.wLeft);
  const centre = frac * s;
  const delta = 2.5 * Math.sqrt(s * frac * (1 - frac)) + 1;
  const loIdx = Math.max(0, Math.floor(centre - delta));
  const hiIdx = Math.min(s - 1, Math.ceil(centre + delta));
  return [sample[loIdx], sample[hiIdx]];
}

/** Johnson–Mizoguchi pivot: the weighted median of the row medians (weights = active positions). */
function medianOfRowMedians(sel: Selection, mat: DifferenceMatrix): number {
  const { xr, L, R, n } = sel;
  const vals = new Float64Array(n);
  const wts = new Float64Array(n);
  let m = 0;
  let total = 0;
  for (let t = 0; t < n; t++) {
    if (R[t] <= L[t]) continue;
    vals[m] = xr[t] + mat.y[(L[t] + R[t] - 1) >>> 1];
    wts[m] = R[t] - L[t];
    total += wts[m];
    m++;
  }
  return weightedSelect(vals, wts, m, Math.ceil(total / 2));
}

/**
 * Gather the active cells and finish with a weighted quickselect; with wantNext also the next order
 * statistic when it is among them (else null).
 */
function finishByEnumeration(sel: Selection, mat: DifferenceMatrix, r: number, wantNext: boolean): Selected {
  const { xr, wr, L, R, n } = sel;
  const { y, wy } = mat;
  const { vals, wts } = workspace(mat);
  let m = 0;
  for (let t = 0; t < n; t++) {
    const xi = xr[t];
    const wi = wr[t];
    for (let c = L[t]; c < R[t]; c++) {
      vals[m] = xi + y[c];
      wts[m] = wi * wy[c];
      m++;
    }
  }
  const value = weightedSelect(vals, wts, m, r);
  // the quickselect only reorders the cells, so a second one on the same arrays is valid
  const next = wantNext && r + 1 <= sel.wBelowHigh - sel.wLeft ? weightedSelect(vals, wts, m, r + 1) : null;
  return { value, next };
}

interface Selected {
  value: number;
  /** D_(k+1) when it was found on the way (asked for and cheap), else null. */
  next: number | null;
}

/**
 * D_(k), 1 ≤ k ≤ total: the k-th smallest difference counted with multiplicity.
 * Rounds of: choose pivots p1 ≤ p2 inside (low, high); one counting walk; keep the part of the active
 * set that still holds the answer. Pivot rules, switched on progress (the active set must at least
 * halve): weighted sampling (first round, and after a poor interpolation), interpolation between the
 * bracketing values (the count of differences ≤ v is smooth in v for continuous data, so a secant step
 * with a guard band lands very close), and the Johnson–Mizoguchi median of row medians after a poor
 * sampling round (guaranteed to remove a quarter of the active cells).
 */
function selectKth(mat: DifferenceMatrix, k: number): number {
  return select(mat, k, false).value;
}

function select(
  mat: DifferenceMatrix,
  k: number,
  wantNext: boolean,
  onlyRowMedians = false,
  from: Bracket | null = null,
  keep: ((b: Bracket) => void) | null = null,
): Selected {
  const sel = startSelection(mat, from);
  const random = makeRandom(0x5eed1234);
  const walk: WalkResult = { wlt1: 0, wle1: 0, wlt2: 0, wle2: 0, sle1: 0, slt2: 0 };
  let mode: 'sample' | 'interpolate' | 'median' = onlyRowMedians ? 'median' : from !== null ? 'interpolate' : 'sample';
  // guard band (in weight) around the interpolated rank: from a kept bracket, a few times the miss
  // measured there (linear interpolation errs alike for nearby ranks), else 1 % of its weight
  let band = from === null ? 0 : from.miss !== null ? Math.max(1, 3 * from.miss) : 0.01 * (from.wBelowHigh - from.wLeft);
  // From a kept bracket with knots (pivots counted by the selection that kept it), the first round
  // interpolates between the two knots nearest the rank instead of the bracket's ends; the secant's
  // error grows with the square of the span, so the band is the measured miss scaled by (span/span₀)².
  let guide: { low: number; fLow: number; high: number; fHigh: number } | null = null;
  if (from !== null && from.miss !== null && from.knots.length > 0) {
    let low = from.low;
    let fLow = from.wLeft;
    let high = from.high;
    let fHigh = from.wBelowHigh;
    for (const knot of from.knots) {
      if (knot.lt < k && k <= knot.le) return { value: knot.v, next: k + 1 <= knot.le ? knot.v : null };
      if (knot.le < k && knot.v > low) {
        low = knot.v;
        fLow = knot.le;
      }
      if (knot.lt >= k && knot.v < high) {
        high = knot.v;
        fHigh = knot.lt;
      }
    }
    const ratio = (high - low) / from.missSpan;
    if (fHigh > fLow && high > low && Number.isFinite(ratio)) {
      guide = { low, fLow, high, fHigh };
      band = Math.max(1, 3 * from.miss * Math.min(1, ratio * ratio));
    }
  }
  let kept: Bracket | null = null;
  for (;;) {
    const positions = sel.sumR - sel.sumL;
    const wAct = sel.wBelowHigh - sel.wLeft;
    const r = k - sel.wLeft; // target rank among the active cells, 1 ≤ r ≤ wAct
    // Gathering the active cells costs about one walk once they are no more than the rows.
    if (positions <= Math.max(ENUM_LIMIT, sel.n)) return finishByEnumeration(sel, mat, r, wantNext);
    if (positions < sel.n / 2) compact(sel, mat);
    let p1: number;
    let p2: number;
    let predicted1 = NaN;
    let predicted2 = NaN;
    let interpolationSpan = NaN;
    if (mode === 'median') {
      p1 = p2 = medianOfRowMedians(sel, mat);
    } else if (mode === 'sample') {
      [p1, p2] = samplePivots(sel, mat, r, random);
    } else {
      // secant between (low, #(D ≤ low)) and (high, #(D < high)): the selection's bracket, or the
      // guide's knots (inside it) in a first round from a kept bracket
      const low = guide !== null ? guide.low : sel.low;
      const high = guide !== null ? guide.high : sel.high;
      const fLow = guide !== null ? guide.fLow : sel.wLeft;
      const fSpan = guide !== null ? guide.fHigh - guide.fLow : wAct;
      const rr = k - fLow;
      const span = high - low;
      interpolationSpan = span;
      const f1 = Math.max(0, (rr - 0.5 - band) / fSpan);
      const f2 = Math.min(1, (rr - 0.5 + band) / fSpan);
      p1 = low + f1 * span;
      p2 = low + f2 * span;
      if (!(p1 > low)) p1 = low + 0.25 * span;
      if (!(p2 < high)) p2 = high - 0.25 * span;
      if (!(p1 <= p2)) p1 = p2;
      predicted1 = fLow + ((p1 - low) / span) * fSpan;
      predicted2 = fLow + ((p2 - low) / span) * fSpan;
      guide = null;
    }
    countWalk(sel, mat, p1, p2, walk);
    if (keep !== null && sel.fresh && walk.wle1 < k && k <= walk.wlt2) {
      kept = {
        L: sel.sL.slice(0, sel.n),
        R: sel.sR.slice(0, sel.n),
        sumL: walk.sle1,
        sumR: walk.slt2,
        wLeft: walk.wle1,
        wBelowHigh: walk.wlt2,
        low: p1,
        high: p2,
        miss: null,
        missSpan: NaN,
        knots: [],
      };
      keep(kept);
    }
    if (kept !== null) {
      kept.knots.push({ v: p1, lt: walk.wlt1, le: walk.wle1 });
      if (p2 !== p1) kept.knots.push({ v: p2, lt: walk.wlt2, le: walk.wle2 });
    }
    sel.fresh = false;
    if (walk.wlt1 < k && k <= walk.wle1) return { value: p1, next: k + 1 <= walk.wle1 ? p1 : null };
    if (walk.wlt2 < k && k <= walk.wle2) return { value: p2, next: k + 1 <= walk.wle2 ? p2 : null };
    // Keep the part that holds the answer. Between p1 and p2: cells > p1 and < p2 (the arrays the
    // walk stored). Below p1 or above p2: the stored boundary on that side (valid, if less tight).
    if (k > walk.wle1) {
      [sel.L, sel.sL] = [sel.sL, sel.L];
      sel.sumL = walk.sle1;
      sel.wLeft = walk.wle1;
      sel.low = p1;
    }
    if (k <= walk.wlt2) {
      [sel.R, sel.sR] = [sel.sR, sel.R];
      sel.sumR = walk.slt2;
      sel.wBelowHigh = walk.wlt2;
      sel.high = p2;
    }
    sel.cumValid = false;
    const remaining = sel.sumR - sel.sumL;
    const progressed = remaining <= positions / 2;
    if (mode === 'interpolate') {
      const miss = Math.max(Math.abs(walk.wle1 - predicted1), Math.abs(walk.wle2 - predicted2));
      if (kept !== null && kept.miss === null) {
        kept.miss = miss;
        kept.missSpan = interpolationSpan;
      }
      band = Math.max(1, 8 * miss * ((sel.wBelowHigh - sel.wLeft) / wAct));
    } else {
      band = 0.01 * (sel.wBelowHigh - sel.wLeft);
    }
    const bracketed = Number.isFinite(sel.low) && Number.isFinite(sel.high);
    if (onlyRowMedians) mode = 'median';
    else if (progressed) mode = bracketed ? 'interpolate' : 'sample';
    else mode = mode === 'sample' ? 'median' : 'sample';
  }
}

function checkSamples(a: Sample, b: Sample): void {
  if (a.n === 0 || b.n === 0) throw new RangeError(`group ${a.n === 0 ? 'a' : 'b'} is empty; there are no differences`);
}

function checkRank(k: number, total: number): void {
  if (!Number.isInteger(k) || k < 1 || k > total) {
    throw new RangeError(`k is ${k}; it must be a whole number from 1 to n_a·n_b = ${total}`);
  }
}

/**
 * D_(k): the k-th smallest (1-based, with multiplicity) of the n_a·n_b differences a_i − b_j, found
 * without materialising them. O((K_a + K_b)·log(K_a·K_b)) worst case.
 */
export function kthPairwiseDifference(a: Sample, b: Sample, k: number): number {
  checkSamples(a, b);
  checkRank(k, a.n * b.n);
  return selectKth(differenceMatrix(a, b), k);
}

/**
 * D_(k) by Johnson–Mizoguchi rounds only (the weighted median of the row medians as the pivot of every
 * round): the guaranteed-progress fallback of kthPairwiseDifference, exported so that tests can check it
 * on its own. Same answer, usually more rounds.
 */
export function kthPairwiseDifferenceByRowMedians(a: Sample, b: Sample, k: number): number {
  checkSamples(a, b);
  checkRank(k, a.n * b.n);
  return select(differenceMatrix(a, b), k, false, true).value;
}

/** D_(k) and D_(k+1) (1 ≤ k < n_a·n_b): one selection and one counting walk. */
export function kthAndNextPairwiseDifference(a: Sample, b: Sample, k: number): [number, number] {
  checkSamples(a, b);
  const mat = differenceMatrix(a, b);
  checkRank(k, mat.total - 1);
  return kthAndNext(mat, k);
}

function kthAndNext(mat: DifferenceMatrix, k: number): [number, number] {
  const { value, next } = select(mat, k, true);
  if (next !== null) return [value, next];
  const after = countAtMost(mat, value);
  return [value, after.count >= k + 1 ? value : after.next];
}

/**
 * Order statistics of one matrix, remembering the rank range each value found covers: on tied
 * (lattice) data the interval bounds often share the median's value and then cost nothing.
 */
class OrderStatistics {
  private readonly known: { below: number; atMost: number; value: number }[] = [];
  /** The first-round bracket of the median's selection (many distinct values only). */
  private bracket: Bracket | null = null;
  /** keepBracket: share the median's first-round bracket whatever the number of distinct values (tests). */
  constructor(
    readonly mat: DifferenceMatrix,
    private readonly keepBracket = false,
  ) {}

  /** D_(k), 1-based. */
  get(k: number): number {
    for (const e of this.known) if (e.below < k && k <= e.atMost) return e.value;
    const b = this.bracket;
    if (b !== null && b.wLeft < k && k <= b.wBelowHigh) return select(this.mat, k, false, false, b).value;
    return selectKth(this.mat, k);
  }

  /** D_(k) with the rank range of its value recorded (one extra walk). */
  getAndRecord(k: number): { value: number; below: number; atMost: number; next: number } {
    const value = this.get(k);
    const { below, count, next } = countAtMost(this.mat, value);
    this.known.push({ below, atMost: count, value });
    return { value, below, atMost: count, next };
  }

  /**
   * The median of the differences (the Hodges–Lehmann estimate). With few distinct values the rank
   * range of the median's value is recorded (a cheap walk; on tied data the interval bounds then often
   * come free); with many, D_(N/2+1) comes from the same selection instead.
   */
  median(): number {
    const N = this.mat.total;
    const fewDistinct = !this.keepBracket && this.mat.x.length + this.mat.y.length <= 65536;
    if (N % 2 === 1) return fewDistinct ? this.getAndRecord((N + 1) / 2).value : this.get((N + 1) / 2);
    if (fewDistinct) {
      const lo = this.getAndRecord(N / 2);
      return midpoint(lo.value, lo.atMost >= N / 2 + 1 ? lo.value : lo.next);
    }
    // keep the first round's bracket: the interval's ranks usually fall inside it
    const { value, next } = select(this.mat, N / 2, true, false, null, (b) => {
      this.bracket = b;
    });
    if (next !== null) return midpoint(value, next);
    const after = countAtMost(this.mat, value);
    return midpoint(value, after.count >= N / 2 + 1 ? value : after.next);
  }
}

/**
 * The median of the differences and D_(k) for each k in `ranks`, computed as hodgesLehmann computes its
 * estimate and interval on many distinct values: the median's selection keeps its first-round bracket and
 * the pivots it counted, and each later rank starts from them (with `shareBracket` false, each rank is an
 * independent selection). Exported so that tests can check the shared path on small data. 1 ≤ k ≤ n_a·n_b.
 */
export function medianAndOrderStatistics(a: Sample, b: Sample, ranks: readonly number[], shareBracket = true): { median: number; values: number[] } {
  checkSamples(a, b);
  const mat = differenceMatrix(a, b);
  for (const k of ranks) checkRank(k, mat.total);
  const os = new OrderStatistics(mat, shareBracket);
  const median = os.median();
  return { median, values: ranks.map((k) => (shareBracket ? os.get(k) : selectKth(mat, k))) };
}

/** (x + y)/2 correctly rounded (Knuth's TwoSum), as R's mean of two values. */
function midpoint(x: number, y: number): number {
  const s = x + y;
  if (!Number.isFinite(s)) return x / 2 + y / 2;
  const bv = s - x;
  const err = (x - (s - bv)) + (y - bv);
  return s / 2 + err / 2;
}


// ---------------------------------------------------------------------------------------------------
// Exact critical values
// ---------------------------------------------------------------------------------------------------

/**
 * Slack allowed when a cumulative probability of U is compared with a requested tail probability α, so that
 * a P(U ≤ u) that equals α in exact arithmetic counts as reaching it whatever the rounding of the two:
 *  - relative 128ε for the cumulative sum: against exact integer counts of the tie-free distribution (the
 *    Gaussian binomial coefficients) the summed probabilities were within 4e-15 ≈ 18ε relative for sizes up
 *    to 200 × 200 and 20 × 1500, so 128ε leaves a margin of seven;
 *  - absolute ε/2 for α itself: α = 1 − level, and a decimal level such as 0.95 is stored to within ε/2, the
 *    subtraction then being exact.
 * A true P(U ≤ u) just below α by less than this slack (a coincidence at the 1e-14 level) would be counted
 * as reaching it; the interval is then one order statistic wider, and achievedLevel reports its coverage.
 */
const QUANTILE_SLACK_RELATIVE = 128 * Number.EPSILON;
const QUANTILE_SLACK_ABSOLUTE = Number.EPSILON / 2;

/**
 * The α-quantile of U under an exact distribution (tie-free or conditional on the ties): the smallest
 * support point u (P(U = u) > 0) with P(U ≤ u) ≥ α, up to the slack above, by summing the probabilities
 * from u = 0 upwards in the same order as exactCdf. On the tie-free distribution this is the value of R's
 * qwilcox(α, n_a, n_b) (checked through the exact intervals of tests/fixtures/r-reference.json and in exact
 * integer arithmetic by the tests). O(u).
 */
function exactLowerQuantile(dist: ExactRankSumDistribution, alpha: number): number {
  const probabilities = dist.probabilities;
  const target = alpha - (QUANTILE_SLACK_RELATIVE * alpha + QUANTILE_SLACK_ABSOLUTE);
  let cumulative = 0;
  for (let index = 0; index < probabilities.length; index++) {
    if (probabilities[index] === 0) continue; // not a support point of U
    cumulative += probabilities[index];
    if (cumulative >= target) return index / dist.unitsPerU;
  }
  return (probabilities.length - 1) / dist.unitsPerU;
}

function probabilityBetween(dist: ExactRankSumDistribution, lo: number, hi: number): number {
  const p = dist.probabilities;
  const a = Math.max(0, Math.ceil(lo * dist.unitsPerU - 1e-9));
  const b = Math.min(p.length - 1, Math.floor(hi * dist.unitsPerU + 1e-9));
  let sum = 0;
  for (let x = a; x <= b; x++) sum += p[x];
  return Math.min(1, sum);
}

// ---------------------------------------------------------------------------------------------------
// The estimate and interval
// ---------------------------------------------------------------------------------------------------

type Ci = HodgesLehmannResult['ci'];

/**
 * Hodges–Lehmann shift estimate (median of a_i − b_j) and its confidence interval by inverting the
 * rank-sum test (header for the rules). `analysis` may pass the result of rank-sum.ts's
 * analyseRankSum(a, b, exact) to avoid computing an exact distribution twice.
 */
export function hodgesLehmann(
  a: Sample,
  b: Sample,
  opts: { alternative: Alternative; confidenceLevel: number; exact: ExactMode; analysis?: RankSumAnalysis },
): HodgesLehmannResult {
  const { alternative, confidenceLevel: level } = opts;
  if (!ALTERNATIVES.includes(alternative)) {
    throw new RangeError(`alternative is "${String(alternative)}"; use one of ${ALTERNATIVES.join(', ')}`);
  }
  if (typeof level !== 'number' || !(level > 0 && level < 1)) {
    throw new RangeError(`confidenceLevel is ${String(level)}; it must be a number strictly between 0 and 1`);
  }
  if (a.n === 0 || b.n === 0) {
    const reason = `group ${a.n === 0 ? 'a' : 'b'} has no observations, so there are no pairwise differences`;
    return freezeDeep({ estimate: null, ci: { level, achievedLevel: null, lower: null, upper: null, reason }, reason });
  }
  const smallestDiff = a.values[0] - b.values[b.values.length - 1];
  const largestDiff = a.values[a.values.length - 1] - b.values[0];
  if (!Number.isFinite(smallestDiff) || !Number.isFinite(largestDiff)) {
    const reason = 'some differences a_i − b_j exceed the range of double-precision numbers (|a − b| > 1.8e308)';
    return freezeDeep({ estimate: null, ci: { level, achievedLevel: null, lower: null, upper: null, reason }, reason });
  }
  const an = opts.analysis ?? analyseRankSum(a, b, opts.exact);
  const os = new OrderStatistics(differenceMatrix(a, b));
  const estimate = os.median();
  let ci: Ci;
  if (an.method === 'exact' && an.exact !== null) {
    ci = an.exact.tieFree ? exactTieFreeInterval(os, an.exact, alternative, level) : exactConditionalInterval(os, an.exact, alternative, level);
  } else {
    ci = normalInterval(os, an.variance ?? 0, alternative, level);
  }
  return freezeDeep({ estimate, ci });
}

const ONE_SIDED_LOWER = 'the interval is one-sided ("less"): unbounded below';
const ONE_SIDED_UPPER = 'the interval is one-sided ("greater"): unbounded above';

function exactTieFreeInterval(os: OrderStatistics, dist: ExactRankSumDistribution, alternative: Alternative, level: number): Ci {
  const N = os.mat.total;
  const alpha = 1 - level;
  let qu = exactLowerQuantile(dist, alternative === 'two-sided' ? alpha / 2 : alpha);
  if (qu === 0) qu = 1;
  const tail = exactCdf(dist, qu - 1);
  if (alternative === 'two-sided') {
    return {
      level,
      achievedLevel: Math.max(0, 1 - 2 * tail),
      lower: os.get(qu),
      upper: os.get(N - qu + 1),
    };
  }
  if (alternative === 'greater') {
    return { level, achievedLevel: 1 - tail, lower: os.get(qu), upper: null, reason: ONE_SIDED_UPPER };
  }
  return { level, achievedLevel: 1 - tail, lower: null, upper: os.get(N - qu + 1), reason: ONE_SIDED_LOWER };
}

function exactConditionalInterval(os: OrderStatistics, dist: ExactRankSumDistribution, alternative: Alternative, level: number): Ci {
  const N = os.mat.total;
  const alpha = 1 - level;
  const a2 = alternative === 'two-sided' ? alpha : 2 * alpha; // one-sided: a side of the two-sided interval at 1 − 2α
  const qLo = exactLowerQuantile(dist, a2 / 2);
  const qHi = exactLowerQuantile(dist, 1 - a2 / 2);
  const multiplicity = os.getAndRecord(1).atMost;
  if (qHi > N - multiplicity) {
    const reason =
      'the exact conditional distribution is too coarse for this level: its upper critical value exceeds every attainable value of the statistic under a shift (coin returns no interval here)';
    return { level, achievedLevel: null, lower: null, upper: null, reason };
  }
  const lowerIndex = N - Math.floor(qHi);
  const upperIndex = N - Math.ceil(qLo) + 1;
  const lower = alternative === 'less' ? null : os.get(lowerIndex);
  const upperFinite = upperIndex <= N;
  const upper = alternative === 'greater' || !upperFinite ? null : os.get(upperIndex);
  let achievedLevel: number;
  if (alternative === 'two-sided') achievedLevel = probabilityBetween(dist, qLo, qHi);
  else if (alternative === 'greater') achievedLevel = exactCdf(dist, qHi);
  else achievedLevel = exactSf(dist, qLo);
  const reasons: string[] = [];
  if (alternative === 'greater') reasons.push(ONE_SIDED_UPPER);
  if (alternative === 'less') reasons.push(ONE_SIDED_LOWER);
  if (alternative !== 'greater' && !upperFinite) {
    reasons.push('the lower critical value of the exact conditional distribution is its minimum, so no finite upper bound is excluded (coin reports +∞)');
  }
  const ci: Ci = { level, achievedLevel, lower, upper };
  if (reasons.length > 0) ci.reason = reasons.join('; ');
  return ci;
}

function normalInterval(os: OrderStatistics, variance: number, alternative: Alternative, level: number): Ci {
  const N = os.mat.total;
  const alpha = 1 - level;
  const z = normalQuantile(alternative === 'two-sided' ? 1 - alpha / 2 : 1 - alpha);
  const sigma = Math.sqrt(variance);
  const k = Math.floor(N / 2 - z * sigma);
  if (k < 1) {
    const reason = `too few observations for this level under the normal approximation: k = ⌊N/2 − z·√V⌋ = ${k} < 1, so the bound would lie beyond the smallest or largest difference`;
    return {
      level,
      achievedLevel: null,
      lower: null,
      upper: null,
      reason,
    };
  }
  let achievedLevel: number | null = null;
  const reasons: string[] = [];
  if (sigma > 0) {
    const tail = normalUpperTail((N / 2 - k + 0.5) / sigma);
    achievedLevel = alternative === 'two-sided' ? Math.max(0, 1 - 2 * tail) : 1 - tail;
  } else {
    reasons.push('all observations are equal, so U has no variance and the achieved level is undefined');
  }
  let lower: number | null = null;
  let upper: number | null = null;
  if (alternative !== 'less') lower = os.get(k);
  else reasons.push(ONE_SIDED_LOWER);
  if (alternative !== 'greater') upper = os.get(N + 1 - k);
  else reasons.push(ONE_SIDED_UPPER);
  const ci: Ci = { level, achievedLevel, lower, upper };
  if (reasons.length > 0) ci.reason = reasons.join('; ');
  return ci;
}
