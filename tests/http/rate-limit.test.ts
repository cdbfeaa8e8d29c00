/**
 * The answer budget (server/http/rate-limit.ts) on its own, with a clock passed in: a token bucket of `perMinute`
 * answers that refills at perMinute / 60 s; a request is admitted when the bucket holds its answers or is full, and
 * then charges all of them (the bucket may go below zero).
 */
import { describe, expect, it } from 'vitest';
import { AnswerBudget } from '../../server/http/rate-limit.js';

describe('AnswerBudget', () => {
  it('admits up to the budget, refuses what does not fit, and names when it will', () => {
    const b = new AnswerBudget(60); // one answer a second
    expect(b.take('k', 57, 0)).toEqual({ admitted: true, remaining: 3, retryAfterS: 1, resetS: 57 });
    // 5 answers with 3 left: refused, nothing charged; 2 more are needed → 2 s.
    expect(b.take('k', 5, 0)).toEqual({ admitted: false, remaining: 3, retryAfterS: 2, resetS: 57 });
    expect(b.take('k', 3, 0).admitted).toBe(true);
    expect(b.hasRoom('k', 0)).toEqual({ room: false, retryAfterS: 1, resetS: 60 });
    // 2.5 s later 2.5 answers have come back.
    expect(b.take('k', 2, 2500)).toMatchObject({ admitted: true, remaining: 0 });
    // Another key has its own budget.
    expect(b.take('other', 60, 2500)).toMatchObject({ admitted: true, remaining: 0 });
  });

  it('a request larger than the whole budget is admitted once on a full bucket, then the debt is paid back in time', () => {
    const b = new AnswerBudget(600); // 10 answers a second
    expect(b.take('k', 10_000, 0)).toMatchObject({ admitted: true, remaining: 0 });
    // 9,400 answers of debt: one answer fits again after 9,401 / 10 per s = 940.1 s → 941 s.
    expect(b.hasRoom('k', 0)).toMatchObject({ room: false, retryAfterS: 941 });
    expect(b.take('k', 1, 940_000).admitted).toBe(false);
    expect(b.take('k', 1, 941_000).admitted).toBe(true);
    // Long-run rate: over 30 minutes of back-to-back 10,000-answer batches at most 10,000 + 30 × 600 answers pass.
    const c = new AnswerBudget(600);
    let stored = 0;
    for (let t = 0; t <= 30 * 60_000; t += 100) if (c.take('k', 10_000, t).admitted) stored += 10_000;
    expect(stored).toBeLessThanOrEqual(10_000 + 30 * 600);
    expect(stored).toBeGreaterThanOrEqual(10_000);
  });
});
