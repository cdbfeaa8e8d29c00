/**
 * omnibus-flags.ts — the quality flags of a comparison of three or more conditions (the flag vocabulary
 * and shape of flags.ts: { code, severity, message, detail }).
 *
 *   omnibus_tests_disagree  Welch's ANOVA and the Kruskal–Wallis test fall on different sides of α (one
 *                           finds a difference among the conditions, the other does not).       — service rule
 *   one_condition_drives    an omnibus test is below α, and leaving out exactly one condition (and no other
 *                           single condition) lifts its p to α or above: the "overall" difference is the
 *                           difference of that one condition from the rest.                     — service rule
 *                           (a leave-one-condition-out check, in the spirit of Cook 1977's influence)
 * Both are data descriptions, not tests of their own; they say how to read the omnibus numbers.
 *
 * Cost: one_condition_drives recomputes Welch's ANOVA from moments (O(k) each) and the Kruskal–Wallis
 * test from the pooled ranks (O(D · k) each) for each of the k conditions left out: O(D · k²) in all.
 */
import { welchAnovaFromMoments, type FTestResult } from './anova.js';
import type { Moments } from './descriptives.js';
import type { Flag } from './flags.js';
import { kruskalWallis, type KruskalWallisResult } from './kruskal-wallis.js';
import type { Sample } from './sample.js';
import { freezeDeep } from './types.js';

const fmtP = (p: number): string => (p < 0.001 ? p.toExponential(1) : p.toFixed(3));

export interface OmnibusFlagInput {
  samples: readonly Sample[];
  moments: readonly Moments[];
  labels: readonly string[];
  welch: FTestResult;
  kruskal: KruskalWallisResult;
  alpha: number;
}

/** The omnibus flags in a fixed order (omnibus_tests_disagree, then one_condition_drives). */
export function omnibusFlags(input: OmnibusFlagInput): readonly Flag[] {
  const { samples, moments, labels, welch, kruskal, alpha } = input;
  if (!(alpha > 0 && alpha < 1)) throw new RangeError(`alpha is ${String(alpha)}; a number in (0, 1) is required`);
  const flags: Flag[] = [];
  if (welch.p !== null && kruskal.p !== null && welch.p < alpha !== kruskal.p < alpha) {
    const meanSide = welch.p < alpha;
    flags.push({
      code: 'omnibus_tests_disagree',
      severity: 'warning',
      message:
        `Welch’s ANOVA (p = ${fmtP(welch.p)}) and the Kruskal–Wallis test (p = ${fmtP(kruskal.p)}) disagree at α = ${alpha}: ` +
        (meanSide
          ? 'the means differ among the conditions but the ranks do not, which often means a few extreme answers move the means.'
          : 'the ranks differ among the conditions but the means do not, which often means the conditions differ in shape or spread rather than in average.') +
        ' Look at each condition’s spread and skew before reading either test alone.',
      detail: { welchP: welch.p, kruskalWallisP: kruskal.p, alpha },
    });
  }
  const k = samples.length;
  if (k >= 3) {
    type Route = { test: 'welch' | 'kruskalWallis'; p: number | null; without: (c: number) => number | null };
    const routes: Route[] = [
      { test: 'welch', p: welch.p, without: (c) => welchAnovaFromMoments(moments.filter((_, i) => i !== c)).p },
      { test: 'kruskalWallis', p: kruskal.p, without: (c) => kruskalWallis(samples.filter((_, i) => i !== c)).p },
    ];
    const drivers = new Map<number, Record<string, { p: number; pWithout: number }>>();
    for (const r of routes) {
      if (r.p === null || !(r.p < alpha)) continue;
      const lifted: { c: number; p: number }[] = [];
      let undefinedSomewhere = false;
      for (let c = 0; c < k; c++) {
        const pw = r.without(c);
        if (pw === null) undefinedSomewhere = true;
        else if (pw >= alpha) lifted.push({ c, p: pw });
      }
      if (lifted.length === 1 && !undefinedSomewhere) {
        const entry = drivers.get(lifted[0].c) ?? {};
        entry[r.test] = { p: r.p, pWithout: lifted[0].p };
        drivers.set(lifted[0].c, entry);
      }
    }
    for (const [c, tests] of [...drivers.entries()].sort((x, y) => x[0] - y[0])) {
      const parts = Object.entries(tests).map(
        ([t, v]) => `${t === 'welch' ? 'Welch’s ANOVA' : 'Kruskal–Wallis'} p = ${fmtP(v.p)}, without it ${fmtP(v.pWithout)}`,
      );
      flags.push({
        code: 'one_condition_drives',
        severity: 'info',
        message:
          `The overall difference rests on one condition, “${labels[c]}”: without it the other conditions show no difference (${parts.join('; ')}). ` +
          `Read the pairs that involve “${labels[c]}” rather than the overall result.`,
        detail: { condition: labels[c], index: c, tests, alpha },
      });
    }
  }
  return freezeDeep(flags);
}
