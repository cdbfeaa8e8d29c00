/**
 * The studentized range distribution (stats/studentized-range.ts).
 *
 * Sources:
 *   - exact identities for k = 2: the range of two standard normals is √2·|Z|, so P(Q > q; 2, ∞) = 2·Q(q/√2), and
 *     the studentized version is √2·|T_ν|, so P(Q > q; 2, ν) = 2·P(T_ν > q/√2) (Student t tail of distributions.ts);
 *   - tests/fixtures/r-ptukey.json (tests/reference/make-ptukey-fixtures.R, R 4.2.2): over k = 2 … 10,
 *     ν = 2 … 1000 and ∞, q from 0.1 to the point where the upper tail is 1e-12,
 *       `integrated` — the definition integrated independently with R's integrate() (QUADPACK QAGS, rel.tol 1e-13);
 *       `ptukey` / `ptukeyLower` — R's ptukey(q, k, df, lower.tail = FALSE / TRUE).
 * Tolerances (relative): 1e-8 against `integrated` on the upper tail wherever it is ≥ 1e-13 (the target of the
 * issue; the observed worst is printed by the failure message); against R's ptukey 1e-4 (its own accuracy) wherever its upper tail
 * is ≥ 1e-3 and ν ≥ 5 — at ν ≤ 3, and below 1e-3 everywhere, R's ptukey is itself inaccurate (e.g. P(Q > 1000; 10, 2) = 1.86e-13 from ptukey against
 * 1.01e-5 by the definition and by simulation), so the fixture's `integrated` value is the reference there.
 */
import { describe, expect, it } from 'vitest';
import { normalUpperTail, studentUpperTail } from '../../stats/distributions.js';
import { studentizedRangeCdf, studentizedRangeUpperTail } from '../../stats/studentized-range.js';
import { expectRel, loadFixture, relErr } from './fixtures.js';

interface Point {
  q: number;
  k: number;
  df: number | 'Infinity';
  ptukey: number;
  ptukeyLower: number;
  integrated: number | null;
}
const fixture = loadFixture<{ points: Point[] }>('r-ptukey.json');
const dfOf = (p: Point) => (p.df === 'Infinity' ? Infinity : p.df);

describe('studentized range: exact identities for k = 2', () => {
  it('ν = ∞: P(Q > q) = 2·Q(q/√2) (relative 1e-12)', () => {
    for (const q of [0.01, 0.5, 1, 2.77, 5, 8, 12]) {
      expectRel(studentizedRangeUpperTail(q, 2, Infinity), 2 * normalUpperTail(q / Math.SQRT2), 1e-12, `q = ${q}`);
    }
  });
  it('finite ν: P(Q > q) = 2·P(T_ν > q/√2) (relative 1e-9)', () => {
    for (const df of [2, 3.5, 10, 47.3, 300]) {
      for (const q of [0.3, 1, 3, 6, 20]) {
        const expected = 2 * studentUpperTail(q / Math.SQRT2, df);
        if (expected < 1e-13) continue;
        expectRel(studentizedRangeUpperTail(q, 2, df), expected, 1e-9, `q = ${q}, df = ${df}`);
      }
    }
  });
});

describe('studentized range against R (r-ptukey.json)', () => {
  it('covers k 2–10, ν 2–1000 and ∞, and upper tails down to ~1e-12', () => {
    const ks = new Set(fixture.points.map((p) => p.k));
    const dfs = new Set(fixture.points.map((p) => p.df));
    expect([...ks].sort((a, b) => a - b)).toEqual([2, 3, 4, 5, 7, 10]);
    expect(dfs.has('Infinity') && dfs.has(2) && dfs.has(1000)).toBe(true);
    expect(Math.min(...fixture.points.map((p) => p.integrated ?? 1))).toBeLessThan(1e-11);
  });

  it('upper tail within 1e-8 of the integrated definition wherever it is ≥ 1e-13', () => {
    let worst = 0;
    let worstAt = '';
    for (const p of fixture.points) {
      if (p.integrated === null || p.integrated < 1e-13) continue;
      const actual = studentizedRangeUpperTail(p.q, p.k, dfOf(p));
      const err = relErr(actual, p.integrated);
      if (err > worst) {
        worst = err;
        worstAt = `q = ${p.q}, k = ${p.k}, df = ${p.df}: expected ${p.integrated}, actual ${actual}`;
      }
    }
    expect(worst, `worst relative error ${worst} at ${worstAt}; tolerance 1e-8`).toBeLessThanOrEqual(1e-8);
  });

  it('agrees with R’s ptukey to R’s own accuracy (relative 1e-4) where its upper tail is ≥ 1e-3 and ν ≥ 5', () => {
    // R's ptukey is the looser of the two references: at q = 6.97576, k = 3, ν = 5 it gives 0.0099998033 where the
    // integrated definition gives 0.0099998593 (this module agrees with the latter to 1e-8), and at ν = 2 and 3 it
    // is off by more (q = 0.1, k = 2, ν = 2: 0.95006108 against the exact 2·P(T_2 > q/√2) = 0.95006238).
    let worst = 0;
    let worstAt = '';
    for (const p of fixture.points) {
      if (p.ptukey < 1e-3 || (p.df !== 'Infinity' && p.df < 5)) continue;
      const upper = studentizedRangeUpperTail(p.q, p.k, dfOf(p));
      const err = relErr(upper, p.ptukey);
      if (err > worst) {
        worst = err;
        worstAt = `q = ${p.q}, k = ${p.k}, df = ${p.df}: ptukey ${p.ptukey}, integrated ${p.integrated}, actual ${upper}`;
      }
      if (p.ptukeyLower >= 1e-3) expectRel(studentizedRangeCdf(p.q, p.k, dfOf(p)), p.ptukeyLower, 1e-4, `q = ${p.q}, k = ${p.k}, df = ${p.df} cdf`);
    }
    expect(worst, `worst relative error against ptukey ${worst} at ${worstAt}; tolerance 1e-4`).toBeLessThanOrEqual(1e-4);
  });

  it('cdf and upper tail add to 1 (within 1e-10 absolute: each is computed on its own to relative 1e-8 outer tolerance)', () => {
    for (const p of fixture.points.filter((_, i) => i % 5 === 0)) {
      const sum = studentizedRangeCdf(p.q, p.k, dfOf(p)) + studentizedRangeUpperTail(p.q, p.k, dfOf(p));
      expect(Math.abs(sum - 1), `q = ${p.q}, k = ${p.k}, df = ${p.df}: sum ${sum}`).toBeLessThanOrEqual(1e-10);
    }
  });
});

describe('studentized range: edges and bad input', () => {
  it('q ≤ 0 and q = ∞', () => {
    expect(studentizedRangeUpperTail(0, 3, 10)).toBe(1);
    expect(studentizedRangeUpperTail(-1, 3, 10)).toBe(1);
    expect(studentizedRangeCdf(0, 3, 10)).toBe(0);
    expect(studentizedRangeUpperTail(Infinity, 3, 10)).toBe(0);
    expect(studentizedRangeCdf(Infinity, 3, 10)).toBe(1);
  });
  it('is decreasing in q', () => {
    let previous = 1;
    for (let q = 0.5; q < 30; q *= 1.5) {
      const v = studentizedRangeUpperTail(q, 5, 12);
      expect(v, `q = ${q}`).toBeLessThan(previous);
      previous = v;
    }
  });
  it('throws a RangeError on NaN, k < 2 or a fractional k, df ≤ 0', () => {
    expect(() => studentizedRangeUpperTail(Number.NaN, 3, 10)).toThrow(RangeError);
    expect(() => studentizedRangeUpperTail(1, 1, 10)).toThrow(RangeError);
    expect(() => studentizedRangeUpperTail(1, 2.5, 10)).toThrow(RangeError);
    expect(() => studentizedRangeUpperTail(1, 3, 0)).toThrow(RangeError);
  });
});
