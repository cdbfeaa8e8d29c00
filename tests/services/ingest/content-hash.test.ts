/**
 * The idempotency hash (server/services/ingest/validate.ts) must stay byte-identical to the one stored by earlier
 * versions: SHA-256 (createHash) over JSON.stringify([condition, respondent, [[measure, value] … in definition
 * order], weight?]). The reference below is that earlier code; the properties compare it with contentHash and with
 * the hash checkBatch builds while it checks the values, over many random responses (any Unicode in names and
 * respondents, quotes, backslashes, lone surrogates, every kind of finite double, weights or none).
 */
import { createHash } from 'node:crypto';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { checkBatch, checkSingle, contentHash } from '../../../server/services/ingest/validate.js';
import type { ExperimentRecord, MeasureRecord } from '../../../server/store/types.js';

function referenceHash(condition: string, respondent: string | null, values: [string, number][], weight: number | null = null): string {
  const canonical = JSON.stringify(weight === null ? [condition, respondent, values] : [condition, respondent, values, weight]);
  return createHash('sha256').update(canonical, 'utf8').digest('hex');
}

const hex = (bytes: Uint8Array): string => Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength).toString('hex');

const anyText = fc.oneof(
  fc.string({ unit: 'binary', maxLength: 30 }),
  fc.string({ unit: 'grapheme', maxLength: 20 }),
  fc.constantFrom('"', '\\', '\u2028', '\ud800', 'a"b\\c\n', '\u0000\u001f\u007f', 'ü€😀'),
);
const anyNumber = fc.oneof(fc.double({ noNaN: true, noDefaultInfinity: true }), fc.integer({ min: -1000, max: 1000 }), fc.constantFrom(0, -0, 0.1, 1e21, 1e-7, 5e-324, Number.MAX_VALUE));

describe('content hash', () => {
  it('contentHash equals the earlier JSON.stringify + createHash over random contents', () => {
    fc.assert(
      fc.property(
        anyText,
        fc.option(anyText, { nil: null }),
        fc.array(fc.tuple(anyText, anyNumber), { maxLength: 8 }),
        fc.option(fc.double({ min: 1e-9, max: 1e6, noNaN: true }), { nil: null }),
        (condition, respondent, values, weight) => {
          expect(hex(contentHash(condition, respondent, values, weight))).toBe(referenceHash(condition, respondent, values, weight));
        },
      ),
      { numRuns: 3000 },
    );
  });

  it('checkBatch and checkSingle store the same hash as before for random valid responses', () => {
    const slug = fc.stringMatching(/^[a-z][a-z0-9_-]{0,20}$/);
    fc.assert(
      fc.property(
        fc.uniqueArray(slug, { minLength: 1, maxLength: 5 }),
        fc.uniqueArray(slug, { minLength: 1, maxLength: 3 }),
        fc.array(fc.record({ respondent: fc.option(fc.string({ minLength: 1, maxLength: 40 }).filter((s) => !/[\u0000-\u001f\u007f]/.test(s)), { nil: null }), seed: fc.nat() }), { minLength: 1, maxLength: 20 }),
        fc.boolean(),
        (measureIds, conditionIds, shapes, weighted) => {
          const measures: MeasureRecord[] = measureIds.map((id, i) => ({
            key: 10 + i, id, label: id, min: i % 2 ? -50 : 0, max: i % 2 ? 50.5 : 10, integer: i % 2 === 0, required: false, position: i, role: 'outcome',
          }));
          const experiment: ExperimentRecord = {
            key: 1, id: 'e', title: 'E', status: 'open', plannedPerCondition: null, alpha: 0.05, thankYouUrl: null,
            options: weighted ? { weights: 'optional' } : {}, dataVersion: 0, createdAt: '', updatedAt: '',
            conditions: conditionIds.map((id, i) => ({ key: 100 + i, id, label: id, position: i })) as ExperimentRecord['conditions'],
            measures,
          };
          const items = shapes.map(({ respondent, seed }, n) => {
            const values: Record<string, number> = {};
            // Values given in a scrambled order: the canonical text is in definition order whatever the client sent.
            measures.forEach((m, i) => {
              const r = (seed * (i + 7) * 2654435761) % 1000;
              if (r % 5 === 4) return;
              values[m.id] = m.integer ? r % 11 : Math.round(((r / 999) * 100.5 - 50) * 1e4) / 1e4 + (r % 3 === 0 ? 1e-9 : 0);
            });
            const ordered = Object.fromEntries(Object.entries(values).reverse());
            const weight = weighted && seed % 2 === 0 ? (seed % 1000) / 7 + 0.01 : undefined;
            return { responseId: `r${n}`, condition: conditionIds[seed % conditionIds.length], ...(respondent === null ? {} : { respondent }), values: ordered, ...(weight === undefined ? {} : { weight }) };
          });
          const out = checkBatch(experiment, { responses: items }, '2027-01-01T00:00:00.000Z');
          expect(out.errors).toEqual([]);
          expect(out.valid).toHaveLength(items.length);
          out.valid.forEach((v, n) => {
            const item = items[n];
            const canonical = measures.filter((m) => item.values[m.id] !== undefined).map((m): [string, number] => [m.id, item.values[m.id]]);
            expect(hex(v.contentHash)).toBe(referenceHash(item.condition, item.respondent ?? null, canonical, item.weight ?? null));
            expect([...v.values]).toEqual(canonical.map(([id, value]) => [measures.find((m) => m.id === id)!.key, value]));
          });
          const single = checkSingle(experiment, items[0], '2027-01-01T00:00:00.000Z');
          expect(hex(single.valid[0].contentHash)).toBe(hex(out.valid[0].contentHash));
        },
      ),
      { numRuns: 300 },
    );
  });

  it('a known content keeps its known hash (a stored database depends on it)', () => {
    expect(hex(contentHash('bill-first', null, [['satisfaction', 7], ['fair_price', 12.5]]))).toBe(
      referenceHash('bill-first', null, [['satisfaction', 7], ['fair_price', 12.5]]),
    );
    expect(hex(contentHash('a', 'p"1', [['x', -0]], 2))).toBe(createHash('sha256').update('["a","p\\"1",[["x",0]],2]').digest('hex'));
  });
});
