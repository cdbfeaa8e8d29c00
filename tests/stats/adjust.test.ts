import { describe, expect, it } from 'vitest';
import { adjustPValues } from '../../stats/adjust.js';
import { loadFixture } from './fixtures.js';

interface Family {
  name: string;
  description: string;
  p: (number | null)[];
  holm: (number | null)[];
  bh: (number | null)[];
  none: (number | null)[];
}
const fixture = loadFixture<{
  tools: Record<string, string>;
  families: Family[];
}>('r-adjust.json');

// Tolerance: each adjusted value is one multiplication (and, for BH, a division) of an input value, so two
// correct computations can differ only by the rounding of those steps: relative 4·Number.EPSILON.
const REL = 4 * Number.EPSILON;

function expectClose(actual: (number | null)[], expected: (number | null)[], label: string): void {
  expect(actual.length, label).toBe(expected.length);
  for (let i = 0; i < expected.length; i++) {
    const e = expected[i];
    const a = actual[i];
    if (e === null) {
      expect(a, `${label}[${i}]`).toBeNull();
    } else {
      expect(a, `${label}[${i}]`).not.toBeNull();
      const err = Math.abs((a as number) - e);
      expect(err, `${label}[${i}]: expected ${e}, got ${a}, tolerance relative ${REL}`).toBeLessThanOrEqual(REL * Math.abs(e));
    }
  }
}

describe('adjustPValues against R p.adjust (tests/fixtures/r-adjust.json, R 4.2.2 stats::p.adjust)', () => {
  for (const f of fixture.families) {
    it(`${f.name}: ${f.description}`, () => {
      const p = Object.freeze(f.p.slice());
      // Source: R stats::p.adjust(p, "holm"), "BH", "none" (see the fixture's tools block).
      expectClose(adjustPValues(p, 'holm'), f.holm, `${f.name} holm`);
      expectClose(adjustPValues(p, 'bh'), f.bh, `${f.name} bh`);
      expectClose(adjustPValues(p, 'none'), f.none, `${f.name} none`);
      expect(p).toEqual(f.p); // input untouched
    });
  }
});

describe('adjustPValues: properties and input checks', () => {
  it('returns a frozen array and never reorders', () => {
    const p = Object.freeze([0.04, 0.01, null, 0.03]);
    const out = adjustPValues(p, 'holm');
    expect(Object.isFrozen(out)).toBe(true);
    // Hand computation: m = 3; sorted 0.01 (×3 = 0.03), 0.03 (×2 = 0.06), 0.04 (×1 = 0.04 → running max 0.06).
    expect(out[1]).toBeCloseTo(0.03, 15);
    expect(out[3]).toBeCloseTo(0.06, 15);
    expect(out[0]).toBeCloseTo(0.06, 15);
    expect(out[2]).toBeNull();
  });

  it('adjusted values are never below the raw ones and Holm is never below BH', () => {
    const p = Object.freeze([0.001, 0.2, 0.04, 0.013, 0.7, 0.02]);
    const holm = adjustPValues(p, 'holm');
    const bh = adjustPValues(p, 'bh');
    for (let i = 0; i < p.length; i++) {
      expect(holm[i] as number).toBeGreaterThanOrEqual(p[i] as number);
      expect(bh[i] as number).toBeGreaterThanOrEqual(p[i] as number);
      expect(holm[i] as number).toBeGreaterThanOrEqual(bh[i] as number);
    }
  });

  it('throws a RangeError naming the index of a bad p-value', () => {
    expect(() => adjustPValues(Object.freeze([0.1, Number.NaN]), 'holm')).toThrow(/p\[1\]/);
    expect(() => adjustPValues(Object.freeze([1.5]), 'bh')).toThrow(RangeError);
    expect(() => adjustPValues(Object.freeze([-0.01]), 'none')).toThrow(/p\[0\]/);
    expect(() => adjustPValues(Object.freeze([0.1]), 'bonferroni' as 'holm')).toThrow(RangeError);
  });
});
