import { describe, expect, it } from 'vitest';
import {
  FORMATTERS,
  MINUS,
  MISSING,
  formatByKind,
  formatCount,
  formatInterval,
  formatLevel,
  formatNumber,
  formatP,
  formatPExact,
  formatPercent,
  formatZ,
  readPath,
} from '../../server/pages/format.js';

// Expected strings are the page's own rules (format.js header), worked out by hand.

describe('formatNumber', () => {
  it('shows missing values as a dash', () => {
    for (const x of [null, undefined, Number.NaN, Number.POSITIVE_INFINITY, '3']) expect(formatNumber(x)).toBe(MISSING);
  });
  it('keeps whole numbers whole, with thousands separators', () => {
    expect(formatNumber(0)).toBe('0');
    expect(formatNumber(-0)).toBe('0');
    expect(formatNumber(7)).toBe('7');
    expect(formatNumber(1250)).toBe('1,250');
    expect(formatNumber(-35)).toBe(`${MINUS}35`);
  });
  it('shows 3 significant digits and keeps trailing zeros', () => {
    expect(formatNumber(6.8)).toBe('6.80');
    expect(formatNumber(6.8333)).toBe('6.83');
    expect(formatNumber(-0.58)).toBe(`${MINUS}0.580`);
    expect(formatNumber(0.0456)).toBe('0.0456');
    expect(formatNumber(123.456)).toBe('123');
    expect(formatNumber(1234.5)).toBe('1,235');
    expect(formatNumber(0.1 + 0.2)).toBe('0.300');
    expect(formatNumber(2.456, 2)).toBe('2.5');
  });
  it('switches to exponent form for very large and very small numbers', () => {
    expect(formatNumber(1234567)).toBe('1.23e6');
    expect(formatNumber(1e6)).toBe('1e6');
    expect(formatNumber(0.000045)).toBe(`4.5e${MINUS}5`);
    expect(formatNumber(-1e-7)).toBe(`${MINUS}1e${MINUS}7`);
    expect(formatNumber(0.0001)).toBe('0.000100');
  });
});

describe('formatP', () => {
  it('reports small p-values as "< 0.001" and others with 3 significant digits', () => {
    expect(formatP(3e-12)).toBe('< 0.001');
    expect(formatP(0.00099)).toBe('< 0.001');
    expect(formatP(0.001)).toBe('0.00100');
    expect(formatP(0.0421)).toBe('0.0421');
    expect(formatP(0.35)).toBe('0.350');
    expect(formatP(0.99951)).toBe('1.00');
    expect(formatP(1)).toBe('1.00');
    expect(formatP(null)).toBe(MISSING);
  });
  it('gives the exact value for a tooltip', () => {
    expect(formatPExact(3.24e-12)).toBe(`3.2e${MINUS}12`);
    expect(formatPExact(0.04213)).toBe('0.04213');
    expect(formatPExact(0)).toBe('0');
  });
});

describe('formatInterval, formatLevel, formatPercent, formatZ, formatCount', () => {
  it('formats intervals, open sides and missing intervals', () => {
    expect(formatInterval({ level: 0.95, lower: -1.04, upper: -0.12 })).toBe(`[${MINUS}1.04, ${MINUS}0.120]`);
    expect(formatInterval({ lower: null, upper: 2 })).toBe(`[${MINUS}\u221e, 2]`);
    expect(formatInterval({ lower: 0.5, upper: null })).toBe('[0.500, \u221e]');
    expect(formatInterval({ lower: null, upper: null })).toBe(MISSING);
    expect(formatInterval(null)).toBe(MISSING);
  });
  it('formats levels and fractions as percentages', () => {
    expect(formatLevel(0.95)).toBe('95%');
    expect(formatLevel(0.9532)).toBe('95.3%');
    expect(formatLevel(0.999)).toBe('99.9%');
    expect(formatPercent(0.425)).toBe('43%');
    expect(formatPercent(1.2)).toBe('120%');
    expect(formatLevel(undefined)).toBe(MISSING);
  });
  it('formats z statistics and counts', () => {
    expect(formatZ(2.0312)).toBe('2.03');
    expect(formatZ(-1.96)).toBe(`${MINUS}1.96`);
    expect(formatZ(-0.001)).toBe('0.00');
    expect(formatCount(5310)).toBe('5,310');
    expect(formatCount(1234567)).toBe('1,234,567');
    expect(formatCount(null)).toBe(MISSING);
  });
});

describe('formatByKind and readPath (what the browser test uses)', () => {
  it('dispatches by data-format name and rejects unknown names', () => {
    expect(Object.keys(FORMATTERS).sort()).toEqual(['count', 'interval', 'level', 'number', 'p', 'percent', 'text', 'z']);
    expect(formatByKind('p', 0.0421)).toBe(formatP(0.0421));
    expect(formatByKind('interval', { lower: 1, upper: 2 })).toBe('[1, 2]');
    expect(formatByKind('text', 'exact')).toBe('exact');
    expect(() => formatByKind('nope', 1)).toThrow(RangeError);
  });
  it('reads dotted paths, including array indices', () => {
    const json = Object.freeze({ welch: { ci: { lower: 1 } }, monitoring: { groupSequential: { looks: [{ boundaryZ: 4.877 }] } } });
    expect(readPath(json, 'welch.ci.lower')).toBe(1);
    expect(readPath(json, 'monitoring.groupSequential.looks.0.boundaryZ')).toBe(4.877);
    expect(readPath(json, 'welch.p')).toBeUndefined();
    expect(readPath(json, 'a.b.c')).toBeUndefined();
  });
});
