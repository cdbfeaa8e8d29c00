/**
 * The demo (`npm run demo -- --once`): it creates the invented study over HTTP, sees every impossible answer
 * refused, prints both tests for every item and the page address with a read key, says the data are invented,
 * and exits 0. Run in-process (runDemo) so that the test needs no build.
 */
import { describe, expect, it } from 'vitest';
import { runDemo, simulateAnswers } from '../../server/cli/demo.js';

async function demo(args: string[], stop?: Promise<unknown>) {
  let stdout = '';
  let stderr = '';
  const code = await runDemo(args, { stdout: { write: (s: string) => (stdout += s) }, stderr: { write: (s: string) => (stderr += s) } }, stop);
  return { code, stdout, stderr };
}

describe('npm run demo -- --once', () => {
  it('prints both tests for every item, the page URL and a read key, and exits 0', async () => {
    const r = await demo(['--once', '--per-condition', '60']);
    expect(r.code).toBe(0);
    expect(r.stdout).toContain('ALL DATA BELOW ARE INVENTED');
    for (const item of ['satisfaction', 'trust', 'fair_price']) expect(r.stdout).toContain(`[${item}; scale`);
    expect(r.stdout.match(/Welch's t-test {2,}t = /g)).toHaveLength(3);
    expect(r.stdout.match(/Rank-sum \(Mann–Whitney\) {2,}U = /g)).toHaveLength(3);
    expect(r.stdout.match(/^  Rank-sum .*Hodges–Lehmann shift -?[\d.]+ \[/gm)).toHaveLength(3);
    expect(r.stdout).toMatch(/Results page: http:\/\/127\.0\.0\.1:\d+\/experiments\/water-bill-2027\n/);
    expect(r.stdout).toMatch(/Read key \(paste it into the page\): sb_[A-Za-z0-9_-]{43}\n/);
    expect(r.stdout).toContain('120 stored, 10 refused with 422');
    expect(r.stdout.trimEnd().split('\n').at(-1)).toBe('demo: 120 answers stored, 10 refused, 3 comparisons printed; exiting (--once).');
    expect(r.stderr).toContain('posting answers: 130/130 (10 refused as impossible)');
    // Every item has a margin: an equivalence line and a verdict in words each.
    expect(r.stdout.match(/^ {2}equivalence within ±(0\.5|5) \(90% CI\): means \[/gm)).toHaveLength(3);
    expect(r.stdout.match(/^ {2}→ (Equivalent|Different|Inconclusive)[^\n]*\.$/gm)).toHaveLength(3);
    // The second invented study: three letters, the omnibus tests first, then the three pairs.
    expect(r.stdout).toContain('Second study water-letter-2027: 180 invented answers');
    expect(r.stdout).toMatch(/^ {2}Welch's ANOVA {2,}F = [\d.]+, df = 2 and [\d.]+ /m);
    expect(r.stdout).toMatch(/^ {2}Kruskal–Wallis {2,}H = [\d.]+, df = 2 /m);
    expect(r.stdout.match(/^ {2}(plain|bill-chart) − (bill-chart|neighbours) {2,}-?[\d.]+ /gm)).toHaveLength(3);
    expect(r.stdout).toMatch(/experiments\/water-letter-2027 {3}read key: sb_[A-Za-z0-9_-]{43}\n/);
  }, 60_000);

  it('without --once it serves until told to stop', async () => {
    const r = await demo(['--per-condition', '5'], Promise.resolve());
    expect(r.code).toBe(0);
    expect(r.stdout).toContain('Serving until Ctrl-C');
    expect(r.stdout).toContain('demo: stopped.');
  }, 60_000);

  it('the simulation is seeded: same seed, same answers; bill-first rates satisfaction lower on average', () => {
    const a = simulateAnswers(7, 200);
    expect(simulateAnswers(7, 200)).toEqual(a);
    const mean = (c: string) => {
      const xs = a.filter((p) => !p.invalid && p.body.condition === c).map((p) => (p.body.values as { satisfaction: number }).satisfaction);
      return xs.reduce((s, x) => s + x, 0) / xs.length;
    };
    expect(mean('bill-first')).toBeLessThan(mean('service-first'));
    expect(a.filter((p) => p.invalid)).toHaveLength(10);
  });

  it('refuses bad options with exit code 2', async () => {
    expect((await demo(['--port', 'x'])).code).toBe(2);
  });
});
