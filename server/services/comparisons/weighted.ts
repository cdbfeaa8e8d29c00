/**
 * The `weighted` block of a comparison (experiments declared with survey weights) and its flags.
 *
 * Reads the weighted snapshot by the read rule of services/samples.ts (integer items: per-value weighted counts and
 * sums, O(distinct values); continuous items: every weighted answer with its weight, O(n log n) to build), then
 * stats' compareWeighted (design-based t test, Lumley–Scott rank test, weighted summaries) and weightFlags
 * (unequal_weights, dominant_weight, weighting_changes_conclusion). The conclusion flag compares with the unweighted
 * tests of the same answers: the comparison's own Welch and rank-sum results when every answer carries a weight,
 * otherwise those tests recomputed on the weighted answers alone (so both sides describe the same people).
 * Answers whose response has no weight are counted per group (`withoutWeight`) and left out.
 *
 * The read happens here; the statistics (`weightedFromSnapshot`, pure) run where the caller's runner puts them: the
 * comparison service sends them to its worker pool when the groups hold many answers (a continuous item's weighted
 * answers are sorted to build the samples, O(n log n)), else they run in-thread.
 */
import { compareSamples, type Comparison } from '../../../stats/index.js';
import { compareWeighted } from '../../../stats/weighted-comparison.js';
import { weightFlags } from '../../../stats/weight-flags.js';
import { unweighted } from '../../../stats/weighted-sample.js';
import type { Flag } from '../../../stats/flags.js';
import type { MeasureRecord, Store, WeightedSnapshot } from '../../store/types.js';
import type { ComparisonTarget } from '../targets.js';
import { readWeightedSnapshot, weightedSamplesOf } from '../samples.js';
import { weightsOf } from '../../schemas/weights.js';
import type { WeightedBlock } from '../../schemas/weighted.js';

/** The one sentence on monitoring that every weighted block carries. */
export const WEIGHTED_MONITORING_NOTE =
  'Interim monitoring (the monitoring block and recorded looks) uses the unweighted answers; the weights do not enter it.';

export interface WeightedResult {
  dataVersion: number;
  block: WeightedBlock;
  flags: readonly Flag[];
}

/** True when comparisons of this experiment carry a weighted block. */
export function hasWeights(t: ComparisonTarget): boolean {
  return weightsOf(t.experiment.options).weights !== 'none';
}

/** The statistics of a weighted block from its snapshot: pure, so it runs in a worker thread as well as in-thread. */
export interface WeightedInput {
  snapshot: WeightedSnapshot;
  measure: MeasureRecord;
  alternative: 'two-sided' | 'less' | 'greater';
  confidenceLevel: number;
  alpha: number;
  labels: { a: string; b: string };
  /** The unweighted comparison of the same conditions (its Welch and rank-sum results). */
  cmp: Pick<Comparison, 'welch' | 'mannWhitney'>;
}

/** Where the statistics of a weighted block run (the service passes its worker pool; in-thread by default). */
export type WeightedRunner = (input: WeightedInput) => Promise<Omit<WeightedResult, 'dataVersion'>>;

/**
 * What the work on a weighted snapshot grows with: the weighted answers of a continuous item (sorted to build the
 * samples), or the per-value sums of an integer item (O(distinct values) whatever the number of answers). O(groups).
 */
export function valuesInWeighted(snapshot: WeightedSnapshot): number {
  let n = 0;
  for (const g of snapshot.groups) n += g.kind === 'pairs' ? g.values.length : g.counts.length;
  return n;
}

/**
 * The weighted block for a target (null when the experiment takes no weights). `cmp` is the unweighted comparison of
 * the same conditions; its Welch and rank-sum results are reused when no answer lacks a weight.
 */
export async function computeWeighted(
  store: Store,
  t: ComparisonTarget,
  options: { alternative: 'two-sided' | 'less' | 'greater'; confidenceLevel: number; includeExcluded: boolean },
  cmp: Pick<Comparison, 'welch' | 'mannWhitney'>,
  run: WeightedRunner = async (input) => weightedFromSnapshot(input),
): Promise<WeightedResult | null> {
  if (!hasWeights(t)) return null;
  const snapshot = await readWeightedSnapshot(store, t.measure, [t.a.key, t.b.key], options.includeExcluded);
  const input: WeightedInput = {
    snapshot,
    measure: t.measure,
    alternative: options.alternative,
    confidenceLevel: options.confidenceLevel,
    alpha: t.experiment.alpha,
    labels: { a: t.a.label, b: t.b.label },
    cmp,
  };
  return { dataVersion: snapshot.dataVersion, ...(await run(input)) };
}

/** The weighted block and its flags from a weighted snapshot (see the header). */
export function weightedFromSnapshot(input: WeightedInput): Omit<WeightedResult, 'dataVersion'> {
  const options = input;
  const cmp = input.cmp;
  const { a, b, withoutWeight } = weightedSamplesOf(input.measure, input.snapshot);
  const weighted = compareWeighted(a, b, { alternative: options.alternative, confidenceLevel: options.confidenceLevel });
  const sameAnswers = withoutWeight.a === 0 && withoutWeight.b === 0;
  let reference: Pick<Comparison, 'welch' | 'mannWhitney'> | null = sameAnswers ? cmp : null;
  if (!sameAnswers && a.n > 0 && b.n > 0) {
    reference = compareSamples(unweighted(a), unweighted(b), { alternative: options.alternative, confidenceLevel: options.confidenceLevel });
  }
  const flags = weightFlags(weighted, reference, { alpha: input.alpha, labels: input.labels });
  const block: WeightedBlock = {
    groups: {
      a: { ...weighted.groups.a, withoutWeight: withoutWeight.a },
      b: { ...weighted.groups.b, withoutWeight: withoutWeight.b },
    },
    tTest: weighted.tTest,
    rankTest: weighted.rankTest,
    monitoring: WEIGHTED_MONITORING_NOTE,
  };
  return { block, flags };
}
