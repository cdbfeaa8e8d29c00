/**
 * Sample — the one representation every statistic in `stats/` works on.
 *
 * What it is: a sample of n real numbers held as its distinct values in strictly increasing order
 * (`values`) with how often each occurs (`counts`, positive whole numbers). A continuous item has
 * mostly counts of 1; a bounded integer item (0–10, 1–7, 0–100) has at most a few hundred distinct
 * values however many answers arrive. Every statistic below is a function of (values, counts), so
 * `compare()` on raw answers and `compareCounts()` on per-value counts run the same code and agree
 * by construction, and the counts path costs O(distinct values) instead of O(n).
 *
 * Constructors:
 *   fromValues(x)            validate (finite), copy, sort, collapse ties — O(n log n)
 *   fromSortedValues(x)      validate order and finiteness, collapse ties — O(n); for values read in index order
 *   fromCounts(counts, min)  counts[k] answers of value min + k (k = 0 … K−1); zero counts dropped — O(K)
 *
 * Bad input (NaN, ±Infinity, a negative or fractional count, unsorted "sorted" data) throws a RangeError
 * that names the offending index. Inputs are never mutated.
 */

export interface Sample {
  /** Distinct values, strictly increasing. */
  readonly values: Float64Array;
  /** counts[i] = number of observations equal to values[i]; positive whole numbers. */
  readonly counts: Float64Array;
  /** Total number of observations (sum of counts). */
  readonly n: number;
}

function checkFinite(x: number, index: number, name: string): void {
  if (typeof x !== 'number' || !Number.isFinite(x)) {
    throw new RangeError(`${name}[${index}] is ${String(x)}; every value must be a finite number`);
  }
}

/** Collapse an already sorted Float64Array into distinct values and counts. */
function collapseSorted(sorted: Float64Array): Sample {
  const n = sorted.length;
  if (n === 0) return Object.freeze({ values: new Float64Array(0), counts: new Float64Array(0), n: 0 });
  let distinct = 1;
  for (let i = 1; i < n; i++) if (sorted[i] !== sorted[i - 1]) distinct++;
  if (distinct === n) {
    // All distinct: reuse the sorted array; counts all 1.
    const counts = new Float64Array(n).fill(1);
    return Object.freeze({ values: sorted, counts, n });
  }
  const values = new Float64Array(distinct);
  const counts = new Float64Array(distinct);
  let k = 0;
  values[0] = sorted[0];
  counts[0] = 1;
  for (let i = 1; i < n; i++) {
    if (sorted[i] === values[k]) {
      counts[k] += 1;
    } else {
      k++;
      values[k] = sorted[i];
      counts[k] = 1;
    }
  }
  return Object.freeze({ values, counts, n });
}

/** Build a Sample from raw observations (any order). `name` is used in error messages. O(n log n). */
export function fromValues(x: ArrayLike<number>, name = 'values'): Sample {
  const n = x.length;
  const copy = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const v = x[i];
    checkFinite(v, i, name);
    copy[i] = v === 0 ? 0 : v; // fold -0 into +0 so that ties are ties
  }
  copy.sort();
  return collapseSorted(copy);
}

/** Build a Sample from observations already in non-decreasing order (e.g. read from an index). O(n). */
export function fromSortedValues(x: ArrayLike<number>, name = 'values'): Sample {
  const n = x.length;
  const copy = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const v = x[i];
    checkFinite(v, i, name);
    if (i > 0 && v < x[i - 1]) {
      throw new RangeError(`${name}[${i}] = ${v} is smaller than ${name}[${i - 1}] = ${x[i - 1]}; sorted input was expected`);
    }
    copy[i] = v === 0 ? 0 : v;
  }
  return collapseSorted(copy);
}

/**
 * Build a Sample from per-value counts of a bounded integer item: counts[k] answers of value min + k.
 * O(K) for K = counts.length.
 */
export function fromCounts(counts: ArrayLike<number>, min = 0, name = 'counts'): Sample {
  checkFinite(min, 0, 'min');
  let distinct = 0;
  let n = 0;
  for (let k = 0; k < counts.length; k++) {
    const c = counts[k];
    checkFinite(c, k, name);
    if (c < 0 || !Number.isInteger(c)) {
      throw new RangeError(`${name}[${k}] is ${c}; counts must be whole numbers ≥ 0`);
    }
    if (c > 0) distinct++;
    n += c;
  }
  const values = new Float64Array(distinct);
  const out = new Float64Array(distinct);
  let j = 0;
  for (let k = 0; k < counts.length; k++) {
    if (counts[k] > 0) {
      values[j] = min + k;
      out[j] = counts[k];
      j++;
    }
  }
  return Object.freeze({ values, counts: out, n });
}

/** Build a Sample from distinct sorted values with counts (validated). O(K). */
export function fromWeighted(values: ArrayLike<number>, counts: ArrayLike<number>, name = 'values'): Sample {
  if (values.length !== counts.length) throw new RangeError(`${name}: values and counts differ in length`);
  const v = new Float64Array(values.length);
  const c = new Float64Array(values.length);
  let n = 0;
  for (let i = 0; i < values.length; i++) {
    checkFinite(values[i], i, name);
    checkFinite(counts[i], i, `${name}.counts`);
    if (counts[i] <= 0 || !Number.isInteger(counts[i])) throw new RangeError(`${name}.counts[${i}] is ${counts[i]}; counts must be whole numbers > 0`);
    if (i > 0 && !(values[i] > values[i - 1])) throw new RangeError(`${name}[${i}] is not greater than ${name}[${i - 1}]; distinct increasing values were expected`);
    v[i] = values[i] === 0 ? 0 : values[i];
    c[i] = counts[i];
    n += counts[i];
  }
  return Object.freeze({ values: v, counts: c, n });
}

/** Expand a Sample back into sorted observations (for tests and small-n algorithms). O(n). */
export function expand(s: Sample): Float64Array {
  const out = new Float64Array(s.n);
  let j = 0;
  for (let i = 0; i < s.values.length; i++) {
    const v = s.values[i];
    for (let c = 0; c < s.counts[i]; c++) out[j++] = v;
  }
  return out;
}

/**
 * The value of the k-th smallest observation (0-based, 0 ≤ k < n) of a Sample. O(K) scan;
 * callers needing many order statistics should walk the cumulative counts themselves.
 */
export function orderStatistic(s: Sample, k: number): number {
  let cum = 0;
  for (let i = 0; i < s.values.length; i++) {
    cum += s.counts[i];
    if (k < cum) return s.values[i];
  }
  throw new RangeError(`order statistic ${k} is outside 0 … ${s.n - 1}`);
}
