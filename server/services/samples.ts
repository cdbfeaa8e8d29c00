/**
 * The one read rule of a measure's answers: an integer measure whose scale spans at most MAX_DENSE_COUNTS values is
 * read as per-value counts (kept by ingest, O(distinct values) to read); any other measure as its values in sorted
 * order. Both become stats/ Samples here, so the comparison, the monitoring block and the looks read alike.
 */
import { fromCounts, fromSortedValues, type Sample } from '../../stats/sample.js';
import { weightedFromIntegerSums, weightedFromPairs, type WeightedSample } from '../../stats/weighted-sample.js';
import { MAX_DENSE_COUNTS, type MeasureRecord, type MeasureSnapshot, type Store, type WeightedSnapshot } from '../store/types.js';

/** True when the measure is read as dense counts, false when as sorted values. */
export function readsCounts(measure: MeasureRecord): boolean {
  return measure.integer && measure.max - measure.min + 1 <= MAX_DENSE_COUNTS;
}

/** The snapshot of two (or more) conditions by the read rule, in one read transaction of the store. */
export function readSnapshot(store: Store, measure: MeasureRecord, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
  return readsCounts(measure)
    ? store.responses.getCountsSnapshot(measure.key, conditionKeys, includeExcluded)
    : store.responses.getSortedValuesSnapshot(measure.key, conditionKeys, includeExcluded);
}

/** The Samples a and b of a two-group snapshot read by the rule. */
export function samplesOf(measure: MeasureRecord, snapshot: MeasureSnapshot): { a: Sample; b: Sample } {
  if (readsCounts(measure)) {
    return { a: fromCounts(snapshot.groups[0], measure.min, 'a'), b: fromCounts(snapshot.groups[1], measure.min, 'b') };
  }
  return { a: fromSortedValues(snapshot.groups[0], 'a'), b: fromSortedValues(snapshot.groups[1], 'b') };
}

/**
 * The weighted read by the same rule: an integer measure read as counts is read as per-value weighted counts and
 * weight sums (O(distinct values)); any other as its weighted answers with their weights (O(n)).
 */
export function readWeightedSnapshot(store: Store, measure: MeasureRecord, conditionKeys: number[], includeExcluded: boolean): Promise<WeightedSnapshot> {
  return store.responses.getWeightedSnapshot(measure.key, conditionKeys, includeExcluded, readsCounts(measure) ? 'sums' : 'pairs');
}

/** The WeightedSamples a and b of a two-group weighted snapshot, and the answers each left out for want of a weight. */
export function weightedSamplesOf(
  measure: MeasureRecord,
  snapshot: WeightedSnapshot,
): { a: WeightedSample; b: WeightedSample; withoutWeight: { a: number; b: number } } {
  const [ga, gb] = snapshot.groups;
  const build = (g: WeightedSnapshot['groups'][number], name: string): WeightedSample =>
    g.kind === 'sums' ? weightedFromIntegerSums(g.counts, g.weightSums, g.weightSquareSums, measure.min, name) : weightedFromPairs(g.values, g.weights, name);
  return { a: build(ga, 'a'), b: build(gb, 'b'), withoutWeight: { a: ga.unweighted, b: gb.unweighted } };
}
