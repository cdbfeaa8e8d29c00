/**
 * POST /v1/planning/sample-size: plans against the committed R fixtures (tests/fixtures/r-planning.json, made by
 * tests/reference/make-planning-fixtures.R with R 4.2.2 stats::power.t.test and pwr 1.3.0 pwr.t2n.test, and
 * Noether's formula evaluated in R), every 4xx as problem+json, and who may call it.
 */
import { readFileSync } from 'node:fs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

type N = number;
type Alt = 'two-sided' | 'less' | 'greater';
interface Fixture {
  powerTTest: { delta: N; sd: N; alpha: N; power: N; alternative: Alt; n: N; powerAtN: N }[];
  ratioPlans: { d: N; alpha: N; power: N; ratio: N; alternative: Alt; n1: N; n2: N; powerAtN: N }[];
  noether: { d: N | null; probabilityOfSuperiority: N; probabilityGiven: boolean; alpha: N; power: N; ratio: N; alternative: Alt; n1: N; n2: N; powerAtN: N }[];
}
const fx = JSON.parse(readFileSync(new URL('../../fixtures/r-planning.json', import.meta.url), 'utf8')) as Fixture;

const PLAN_URL = '/v1/planning/sample-size';
// Power passes through the noncentral t (AS 243) and the t quantile: relative 1e-9 (as tests/stats/planning.test.ts);
// Noether's power is closed form through Φ and Φ⁻¹: relative 1e-12. JSON round trip keeps doubles exactly.
const REL_T = 1e-9;
const REL_NORMAL = 1e-12;
let worst = 0;
function close(actual: number, expected: number, rel: number, label: string): void {
  const err = Math.abs(actual - expected) / Math.abs(expected);
  worst = Math.max(worst, err);
  expect(err, `${label}: expected ${expected}, got ${actual}, relative error ${err} > ${rel}`).toBeLessThanOrEqual(rel);
}

let t: TestApp;
beforeAll(async () => {
  t = await startTestApp();
  expect((await t.createWater()).statusCode).toBe(201);
});
afterAll(async () => {
  await t.close();
});

const plan = (payload: unknown, key?: string | null) => t.request({ method: 'POST', url: PLAN_URL, payload: payload as Record<string, unknown>, key });

describe('plans against R (tests/fixtures/r-planning.json)', () => {
  it('welch, ratio 1: smallest n equals the ceiling of R power.t.test(strict = TRUE) n; power at n as R', async () => {
    for (const c of fx.powerTTest) {
      const label = `delta ${c.delta}, sd ${c.sd}, alpha ${c.alpha}, power ${c.power}, ${c.alternative}`;
      const res = await plan({ test: 'welch', difference: c.delta, sd: c.sd, alpha: c.alpha, power: c.power, alternative: c.alternative });
      expect(res.statusCode, label).toBe(200);
      const body = res.json();
      expect(body.perCondition, label).toEqual([c.n, c.n]);
      expect(body.total).toBe(2 * c.n);
      expect(body.plannedPerCondition).toBe(c.n);
      close(body.achievedPower, c.powerAtN, REL_T, label);
    }
  });

  it('welch, unequal allocation: smallest n_a with n_b = ceil(ratio n_a), as an R scan over pwr::pwr.t2n.test', async () => {
    for (const c of fx.ratioPlans) {
      const label = `d ${c.d}, ratio ${c.ratio}, ${c.alternative}`;
      const res = await plan({ test: 'welch', effectSize: c.d, alpha: c.alpha, power: c.power, ratio: c.ratio, alternative: c.alternative });
      expect(res.statusCode, label).toBe(200);
      const body = res.json();
      expect(body.perCondition, label).toEqual([c.n1, c.n2]);
      expect(body.plannedPerCondition).toBe(Math.max(c.n1, c.n2));
      close(body.achievedPower, c.powerAtN, REL_T, label);
    }
  });

  it('rank-sum: Noether (1987) as computed in R, from d or from P(A > B)', async () => {
    for (const c of fx.noether) {
      const effect = c.probabilityGiven ? { probabilityOfSuperiority: c.probabilityOfSuperiority } : { effectSize: c.d };
      const label = JSON.stringify(effect);
      const res = await plan({ test: 'rank-sum', ...effect, alpha: c.alpha, power: c.power, ratio: c.ratio, alternative: c.alternative });
      expect(res.statusCode, label).toBe(200);
      const body = res.json();
      expect(body.perCondition, label).toEqual([c.n1, c.n2]);
      close(body.achievedPower, c.powerAtN, REL_NORMAL, label);
      close(body.probabilityOfSuperiority, c.probabilityOfSuperiority, REL_NORMAL, `${label} P(A>B)`);
      expect(body.method).toMatch(/Noether/);
    }
  });

  it('the full answer for the issue example (difference 5, sd 12): 92 per condition, defaults filled', async () => {
    const res = await plan({ test: 'welch', difference: 5, sd: 12 });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual({
      test: 'welch',
      alternative: 'two-sided',
      alpha: 0.05,
      power: 0.8,
      ratio: 1,
      perCondition: [92, 92],
      total: 184,
      achievedPower: expect.any(Number),
      method: expect.stringMatching(/noncentral t/),
      effectSize: 5 / 12,
      probabilityOfSuperiority: null,
      plannedPerCondition: 92,
      assumptions: expect.stringMatching(/standard deviation/),
    });
  });

  it('reports the worst relative error against R', () => {
    console.log(`planning endpoint: worst relative error vs R = ${worst.toExponential(2)}`);
    expect(worst).toBeLessThanOrEqual(REL_T);
  });
});

describe('4xx as problem+json', () => {
  const VALIDATION = { type: 'urn:splitballot:problem:validation-failed', title: 'Validation failed', status: 422 };
  async function expect422(payload: unknown, errors: { path: string; message: string | RegExp }[]): Promise<void> {
    const res = await plan(payload);
    expect(res.statusCode, JSON.stringify(payload)).toBe(422);
    expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
    const body = res.json();
    expect(body).toMatchObject(VALIDATION);
    expect(body.errors.map((e: { path: string }) => e.path)).toEqual(errors.map((e) => e.path));
    errors.forEach((e, i) => expect(body.errors[i].message).toMatch(e.message));
  }

  it('neither or both ways of stating the effect', async () => {
    await expect422({ test: 'welch' }, [{ path: '', message: /give the expected effect/ }]);
    await expect422({ test: 'welch', difference: 5, sd: 12, effectSize: 0.4 }, [{ path: 'effectSize', message: /cannot be combined with difference/ }]);
    await expect422({ test: 'rank-sum', effectSize: 0.4, probabilityOfSuperiority: 0.6 }, [
      { path: 'probabilityOfSuperiority', message: /cannot be combined with effectSize/ },
    ]);
  });

  it('difference without sd, sd without difference, sd ≤ 0', async () => {
    await expect422({ test: 'welch', difference: 5 }, [{ path: 'sd', message: 'is needed together with difference' }]);
    await expect422({ test: 'welch', sd: 12 }, [{ path: 'difference', message: 'is needed together with sd' }]);
    await expect422({ test: 'welch', difference: 5, sd: 0 }, [{ path: 'sd', message: 'must be greater than 0' }]);
  });

  it('power ≤ alpha, power or alpha out of range, bad ratio', async () => {
    await expect422({ test: 'welch', effectSize: 0.4, alpha: 0.2, power: 0.1 }, [{ path: 'power', message: /must be greater than alpha \(0.2\)/ }]);
    await expect422({ test: 'welch', effectSize: 0.4, power: 1 }, [{ path: 'power', message: 'must be strictly between 0 and 1' }]);
    await expect422({ test: 'welch', effectSize: 0.4, alpha: 0 }, [{ path: 'alpha', message: 'must be greater than 0' }]);
    await expect422({ test: 'welch', effectSize: 0.4, ratio: 0 }, [{ path: 'ratio', message: 'must be at least 0.0001' }]);
  });

  it('no effect, an effect against the one-sided alternative, P(A > B) for welch, unknown fields and tests', async () => {
    await expect422({ test: 'welch', difference: 0, sd: 3 }, [{ path: 'difference', message: /no effect at all/ }]);
    await expect422({ test: 'welch', effectSize: -0.3, alternative: 'greater' }, [{ path: 'effectSize', message: /points the other way/ }]);
    await expect422({ test: 'rank-sum', probabilityOfSuperiority: 0.4, alternative: 'greater' }, [
      { path: 'probabilityOfSuperiority', message: /points the other way/ },
    ]);
    await expect422({ test: 'welch', probabilityOfSuperiority: 0.6 }, [{ path: 'probabilityOfSuperiority', message: 'is used only by the rank-sum plan' }]);
    await expect422({ test: 'welch', effectSize: 0.4, n: 3 }, [{ path: 'n', message: 'is not a known field' }]);
    await expect422({ test: 't', effectSize: 0.4 }, [{ path: 'test', message: /welch/ }]);
  });

  it('an effect too small for 1e8 answers per condition → 422 with the reason', async () => {
    await expect422({ test: 'rank-sum', effectSize: 1e-5 }, [{ path: '', message: /too small/ }]);
  });

  it('who may plan: read and admin keys (also limited to one experiment); not ingest, not anonymous', async () => {
    const body = { test: 'welch', effectSize: 0.4 };
    expect((await plan(body, await t.key('read'))).statusCode).toBe(200);
    expect((await plan(body, await t.key('read', WATER_ID))).statusCode).toBe(200);
    const ingest = await plan(body, await t.key('ingest'));
    expect(ingest.statusCode).toBe(403);
    expect(ingest.json()).toMatchObject({ type: 'urn:splitballot:problem:forbidden', status: 403 });
    const anonymous = await plan(body, null);
    expect(anonymous.statusCode).toBe(401);
    expect(anonymous.headers['content-type']).toMatch(/^application\/problem\+json/);
  });
});
