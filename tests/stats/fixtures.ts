/**
 * Shared helpers for the statistics tests: reading a reference fixture from tests/fixtures/, the relative
 * error used against R / scipy, and the two-group setup of the tests that run on r-reference.json.
 */
import { readFileSync } from 'node:fs';
import { expect } from 'vitest';
import { analyseRankSum, exactCost, MAX_EXACT_CELLS, MAX_EXACT_WORK, type RankSumAnalysis } from '../../stats/rank-sum.js';
import { fromValues, type Sample } from '../../stats/sample.js';

/** Parse tests/fixtures/<file> (JSON). */
export function loadFixture<T>(file: string): T {
  return JSON.parse(readFileSync(new URL(`../fixtures/${file}`, import.meta.url), 'utf8')) as T;
}

/** |actual − expected| / |expected|; 0 when the two are identical (so an expected 0 must be met exactly). */
export function relErr(actual: number, expected: number): number {
  if (actual === expected) return 0;
  return Math.abs(actual - expected) / Math.abs(expected);
}

/** |actual − expected| / |expected|, or |actual| when the expected value is 0. */
export function relErrOrAbs(actual: number, expected: number): number {
  return expected === 0 ? Math.abs(actual) : Math.abs(actual - expected) / Math.abs(expected);
}

/** Expect a number within relative `tol` of `expected` (relErr above); null fails. */
export function expectRel(actual: number | null, expected: number, tol: number, what: string): void {
  expect(actual, `${what}: expected ${expected}, got null`).not.toBeNull();
  const err = relErr(actual as number, expected);
  expect(err, `${what}: expected ${expected}, actual ${actual}, relative error ${err}, tolerance ${tol}`).toBeLessThanOrEqual(tol);
}

/** As expectRel, but an expected null requires a null. */
export function expectRelOrNull(actual: number | null, expected: number | null, tol: number, what: string): void {
  if (expected === null) {
    expect(actual, `${what}: expected null, actual ${actual}`).toBeNull();
    return;
  }
  expect(actual, `${what}: expected ${expected}, actual null`).not.toBeNull();
  const err = relErr(actual as number, expected);
  expect(err, `${what}: expected ${expected}, actual ${actual}, relative error ${err}, tolerance ${tol}`).toBeLessThanOrEqual(tol);
}

/** The two groups of a fixture data set as Samples (from frozen copies, so the fixture is never mutated). */
export function samples(d: { a: number[]; b: number[] }): { a: Sample; b: Sample } {
  return { a: fromValues(Object.freeze([...d.a])), b: fromValues(Object.freeze([...d.b])) };
}

/** The exact analysis of a data set when it fits the "always" limits (one per data set, shared by its cases). */
export function exactAnalysis(a: Sample, b: Sample, ties: boolean): RankSumAnalysis | null {
  const cost = exactCost(a.n, b.n, ties ? 2 : 1);
  if (cost.work > MAX_EXACT_WORK || cost.cells > MAX_EXACT_CELLS) return null;
  return analyseRankSum(a, b, 'always');
}
