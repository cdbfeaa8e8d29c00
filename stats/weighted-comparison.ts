/**
 * weighted-comparison.ts — the weighted comparison of two conditions (block `weighted`): per-group weighted
 * summaries, the design-based t test of the weighted mean difference and the design-based rank test, all on
 * per-value weight sums. Differences are a − b.
 *
 *   compareWeighted(a, b, options)   two WeightedSamples (weighted-sample.ts)                     O(K_a + K_b)
 *
 * Methods, hypotheses and references: weighted-sample.ts (summaries, Kish's effective n and design effect),
 * weighted-ttest.ts (linearised t test, as R's survey::svyttest on svydesign(id = ~1, weights = ~w)),
 * weighted-rank-test.ts (Lumley & Scott 2013). Cost: O(K_a + K_b) in the number of distinct values.
 */
import type { TTestResult } from './types.js';
import { freezeDeep } from './types.js';
import { weightedDescribe, type WeightedGroupSummary, type WeightedSample } from './weighted-sample.js';
import { weightedRankTest, type WeightedRankTestResult } from './weighted-rank-test.js';
import { resolveWeightedOptions, weightedTTest, type WeightedTestOptions } from './weighted-ttest.js';

export interface WeightedComparison {
  groups: { a: WeightedGroupSummary; b: WeightedGroupSummary };
  /** Design-based t test of the weighted mean difference a − b (linearised standard error, df = n − 2). */
  tTest: TTestResult;
  /** Design-based rank test (Lumley & Scott 2013): difference in weighted mean rank score a − b. */
  rankTest: WeightedRankTestResult;
  options: { alternative: 'two-sided' | 'less' | 'greater'; confidenceLevel: number };
}

/** Weighted comparison of two conditions. O(K_a + K_b). */
export function compareWeighted(a: WeightedSample, b: WeightedSample, options: WeightedTestOptions = {}): WeightedComparison {
  const opts = resolveWeightedOptions(options);
  return freezeDeep({
    groups: { a: weightedDescribe(a), b: weightedDescribe(b) },
    tTest: weightedTTest(a, b, opts),
    rankTest: weightedRankTest(a, b, opts),
    options: opts,
  });
}
