/**
 * least-squares.ts — ordinary least squares by Householder QR, with leverages and the HC2
 * heteroskedasticity-consistent covariance of the coefficients.
 *
 * What it computes: for an n × p design matrix X (full column rank) and outcome y,
 *   β̂ = argmin ‖y − Xβ‖²,  residuals e = y − Xβ̂,  leverages h_ii = x_iᵀ (XᵀX)⁻¹ x_i,
 *   HC2 = (XᵀX)⁻¹ Xᵀ diag( e_i² / (1 − h_ii) ) X (XᵀX)⁻¹       (MacKinnon & White 1985).
 * No hypothesis is tested here; covariate-adjustment.ts builds its tests on these pieces.
 *
 * Method: Householder reflections reduce X to QᵀX = [R; 0] with R upper triangular (Golub & Van Loan,
 * Matrix Computations, 4th ed. 2013, §5.2), applied to y at the same time, so XᵀX is never formed and the
 * condition number enters once, not squared. β̂ solves Rβ = (Qᵀy)_{1..p}; residuals are recomputed from the
 * original X. With u_i = R⁻ᵀ x_i (one forward substitution per row): h_ii = ‖u_i‖², (XᵀX)⁻¹ x_i = R⁻¹ u_i, so
 *   HC2 = R⁻¹ [ Σ_i ω_i u_i u_iᵀ ] R⁻ᵀ,  ω_i = e_i² / (1 − h_ii).
 *
 * Rank check (stated rule): column j is taken as linearly dependent on the columns before it when the norm
 * of its part orthogonal to them, |R_jj|, is at most 1e-9 times its own norm ‖x_j‖ (or ‖x_j‖ = 0). Then, or
 * when n < p, the fit is refused with a reason (never an exception); HC2 is refused when some h_ii is within
 * 1e-10 of 1 (an observation fitted exactly by its own parameter: e_i²/(1 − h_ii) is 0/0).
 *
 * References:
 *   MacKinnon, J. G. & White, H. (1985). Some heteroskedasticity-consistent covariance matrix estimators with
 *     improved finite sample properties. Journal of Econometrics 29, 305–325. doi:10.1016/0304-4076(85)90158-7.
 *   Golub, G. H. & Van Loan, C. F. (2013). Matrix Computations, 4th ed. Johns Hopkins University Press.
 *
 * Cost: O(n·p²) time, O(n·p) memory.
 */

/** A design matrix stored column by column: column j is data[j·n … j·n + n − 1]. */
export interface DesignMatrix {
  readonly n: number;
  readonly p: number;
  readonly data: Float64Array;
  /** Column names, for messages. */
  readonly names: readonly string[];
}

export interface LeastSquaresFit {
  readonly n: number;
  readonly p: number;
  readonly coefficients: Float64Array;
  readonly residuals: Float64Array;
  readonly leverages: Float64Array;
  /** R from the QR factorisation, p × p upper triangular, row-major. */
  readonly r: Float64Array;
  /** u_i = R⁻ᵀ x_i, row-major n × p (h_ii = ‖u_i‖²). */
  readonly u: Float64Array;
}

/** Relative size below which a column's new direction counts as zero (see the header). */
export const RANK_TOLERANCE = 1e-9;
/** Leverages closer to 1 than this make HC2 undefined. */
export const LEVERAGE_TOLERANCE = 1e-10;

/** Euclidean norm with scaling (no overflow or underflow on extreme magnitudes). */
function norm(a: Float64Array, from: number, to: number): number {
  let scale = 0;
  for (let i = from; i < to; i++) scale = Math.max(scale, Math.abs(a[i]));
  if (scale === 0) return 0;
  let s = 0;
  for (let i = from; i < to; i++) {
    const v = a[i] / scale;
    s += v * v;
  }
  return scale * Math.sqrt(s);
}

/** Fit y on X by least squares; a reason instead of a fit when X is rank deficient or n < p. O(n·p²). */
export function leastSquares(x: DesignMatrix, y: ArrayLike<number>): LeastSquaresFit | { reason: string } {
  const { n, p } = x;
  if (y.length !== n) throw new RangeError(`y has ${y.length} entries; the design has ${n} rows`);
  if (x.data.length !== n * p) throw new RangeError(`the design's data has ${x.data.length} entries; ${n} × ${p} expected`);
  if (n < p) return { reason: `There are ${p} parameters but only ${n} observations.` };
  const a = Float64Array.from(x.data);
  const qty = Float64Array.from(y);
  const r = new Float64Array(p * p);
  for (let j = 0; j < p; j++) {
    const col = j * n;
    const original = norm(x.data, col, col + n);
    const rest = norm(a, col + j, col + n);
    if (original === 0 || rest <= RANK_TOLERANCE * original) {
      const name = x.names[j] ?? `column ${j}`;
      return {
        reason:
          original === 0
            ? `The term "${name}" is zero for every observation, so its coefficient is not identified.`
            : `The term "${name}" is a linear combination of the terms before it, so the coefficients are not identified.`,
      };
    }
    // Householder vector v = a_j − α e_j with α = −sign(a_jj)·‖a_j‖ (no cancellation in v_j).
    const alpha = a[col + j] >= 0 ? -rest : rest;
    a[col + j] -= alpha;
    let vtv = 0;
    for (let i = j; i < n; i++) vtv += a[col + i] * a[col + i];
    // Apply H = I − 2 v vᵀ / vᵀv to the remaining columns and to y.
    for (let k = j + 1; k < p; k++) {
      const ck = k * n;
      let dot = 0;
      for (let i = j; i < n; i++) dot += a[col + i] * a[ck + i];
      const f = (2 * dot) / vtv;
      for (let i = j; i < n; i++) a[ck + i] -= f * a[col + i];
    }
    {
      let dot = 0;
      for (let i = j; i < n; i++) dot += a[col + i] * qty[i];
      const f = (2 * dot) / vtv;
      for (let i = j; i < n; i++) qty[i] -= f * a[col + i];
    }
    r[j * p + j] = alpha;
    for (let k = j + 1; k < p; k++) r[j * p + k] = a[k * n + j];
  }
  // Back substitution R β = (Qᵀy)_{1..p}.
  const beta = new Float64Array(p);
  for (let j = p - 1; j >= 0; j--) {
    let s = qty[j];
    for (let k = j + 1; k < p; k++) s -= r[j * p + k] * beta[k];
    beta[j] = s / r[j * p + j];
  }
  const residuals = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let fitted = 0;
    for (let k = 0; k < p; k++) fitted += x.data[k * n + i] * beta[k];
    residuals[i] = y[i] - fitted;
  }
  // u_i = R⁻ᵀ x_i by forward substitution (Rᵀ is lower triangular); h_ii = ‖u_i‖².
  const u = new Float64Array(n * p);
  const leverages = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let h = 0;
    for (let j = 0; j < p; j++) {
      let s = x.data[j * n + i];
      for (let k = 0; k < j; k++) s -= r[k * p + j] * u[i * p + k];
      const v = s / r[j * p + j];
      u[i * p + j] = v;
      h += v * v;
    }
    leverages[i] = h;
  }
  return { n, p, coefficients: beta, residuals, leverages, r, u };
}

/** R⁻¹ of an upper-triangular p × p matrix (row-major), by back substitution column by column. O(p³). */
function upperInverse(r: Float64Array, p: number): Float64Array {
  const inv = new Float64Array(p * p);
  for (let c = 0; c < p; c++) {
    for (let i = c; i >= 0; i--) {
      let s = i === c ? 1 : 0;
      for (let k = i + 1; k <= c; k++) s -= r[i * p + k] * inv[k * p + c];
      inv[i * p + c] = s / r[i * p + i];
    }
  }
  return inv;
}

/**
 * The HC2 covariance matrix of the coefficients (p × p, row-major), or a reason when some leverage is 1.
 * O(n·p² + p³).
 */
export function hc2Covariance(fit: LeastSquaresFit): { covariance: Float64Array } | { reason: string } {
  const { n, p, u, residuals, leverages } = fit;
  const meat = new Float64Array(p * p);
  for (let i = 0; i < n; i++) {
    const oneMinusH = 1 - leverages[i];
    if (!(oneMinusH > LEVERAGE_TOLERANCE)) {
      return { reason: `Observation ${i} has leverage 1 (it alone determines a parameter), so the HC2 standard error is undefined.` };
    }
    const omega = (residuals[i] * residuals[i]) / oneMinusH;
    if (omega === 0) continue;
    const row = i * p;
    for (let j = 0; j < p; j++) {
      const f = omega * u[row + j];
      for (let k = 0; k <= j; k++) meat[j * p + k] += f * u[row + k];
    }
  }
  for (let j = 0; j < p; j++) for (let k = 0; k < j; k++) meat[k * p + j] = meat[j * p + k];
  const rInv = upperInverse(fit.r, p);
  // covariance = R⁻¹ · meat · R⁻ᵀ
  const tmp = new Float64Array(p * p);
  for (let i = 0; i < p; i++) {
    for (let k = 0; k < p; k++) {
      let s = 0;
      for (let m = i; m < p; m++) s += rInv[i * p + m] * meat[m * p + k];
      tmp[i * p + k] = s;
    }
  }
  const covariance = new Float64Array(p * p);
  for (let i = 0; i < p; i++) {
    for (let j = 0; j < p; j++) {
      let s = 0;
      for (let m = j; m < p; m++) s += tmp[i * p + m] * rInv[j * p + m];
      covariance[i * p + j] = s;
    }
  }
  return { covariance };
}
