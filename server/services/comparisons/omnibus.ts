/**
 * The omnibus comparison of every condition of an experiment on one measure (three or more conditions; two work
 * too): one consistent snapshot of all conditions by the read rule (per-value counts for an integer measure,
 * O(distinct values × conditions); sorted values for a continuous one), then stats' compareConditionSamples —
 * Welch's and the classic ANOVA, Kruskal–Wallis, every pair by Games–Howell and Dunn, the equivalence tests of
 * every pair when a margin is known, and the omnibus flags. Caching (by dataVersion, with an ETag) is the
 * comparison service's (service.ts `omnibus`); so is the choice to run the stats of a large continuous measure in
 * its worker pool (the `runner`; e.g. three conditions of 100,000 values with a margin take ≈ 0.6 s of CPU).
 */
import { compareConditionSamples, fromCounts, fromSortedValues, type ConditionsComparison, type Sample } from '../../../stats/index.js';
import type { OmnibusTask } from './worker-pool.js';
import { welchOmegaSquared } from '../../../stats/welch-anova-effect.js';
import type { ExperimentRecord, MeasureRecord, MeasureSnapshot, Store } from '../../store/types.js';
import { readSnapshot, readsCounts } from '../samples.js';
import type { OmnibusBody } from '../../schemas/omnibus.js';
import { distributionGroupFromSample } from '../../views/charts/common.js';
import { renderDistributionChart } from '../../views/charts/distribution.js';
import { describe } from '../../../stats/descriptives.js';

/** Where the stats of a large continuous omnibus run (the service passes its worker pool; in-thread when absent). */
export type OmnibusRunner = (task: Omit<OmnibusTask, 'kind'>) => Promise<ConditionsComparison>;

export interface OmnibusOptions {
  includeExcluded: boolean;
  /** The equivalence margin (already resolved and checked), or null. */
  margin: number | null;
}

/** One snapshot of every condition of the experiment, in definition order, and its Samples. */
export async function readAllConditions(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  includeExcluded: boolean,
): Promise<{ snapshot: MeasureSnapshot; samples: Sample[] }> {
  const keys = experiment.conditions.map((c) => c.key);
  const snapshot = await readSnapshot(store, measure, keys, includeExcluded);
  const counts = readsCounts(measure);
  const samples = snapshot.groups.map((g, i) =>
    counts ? fromCounts(g, measure.min, experiment.conditions[i].id) : fromSortedValues(g, experiment.conditions[i].id),
  );
  return { snapshot, samples };
}

/** The omnibus reply for every condition of `experiment` on `measure`. */
export async function computeOmnibus(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  options: OmnibusOptions,
  runner?: OmnibusRunner,
): Promise<{ body: OmnibusBody; snapshot: MeasureSnapshot }> {
  const { snapshot, samples } = await readAllConditions(store, experiment, measure, options.includeExcluded);
  const labels = experiment.conditions.map((c) => c.label);
  const cmp =
    runner && !readsCounts(measure)
      ? await runner({ groups: snapshot.groups, labels, alpha: experiment.alpha, margin: options.margin })
      : compareConditionSamples(samples, { labels, alpha: experiment.alpha, equivalenceMargin: options.margin });
  const n = cmp.groups.reduce((sum, g) => sum + g.n, 0);
  const ids = experiment.conditions.map((c) => c.id);
  const body: OmnibusBody = {
    experiment: experiment.id,
    measure: measure.id,
    conditions: experiment.conditions.map((c) => ({ id: c.id, label: c.label })),
    dataVersion: snapshot.dataVersion,
    computedAt: new Date().toISOString(),
    alpha: cmp.alpha,
    margin: options.margin,
    groups: cmp.groups,
    welchAnova: { ...cmp.welchAnova, omegaSquared: n > 0 ? welchOmegaSquared(cmp.welchAnova.f, cmp.welchAnova.df1, n).omegaSquared : null },
    classicAnova: cmp.classicAnova,
    kruskalWallis: cmp.kruskalWallis,
    pairs: cmp.pairs.map((p) => ({
      a: ids[p.i],
      b: ids[p.j],
      gamesHowell: p.gamesHowell,
      dunn: p.dunn,
      equivalence: p.equivalence,
    })),
    flags: cmp.flags as OmnibusBody['flags'],
  };
  return { body, snapshot };
}

/** The box plot of every condition side by side (SVG). */
export async function renderOmnibusChart(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  includeExcluded: boolean,
): Promise<{ svg: string; snapshot: MeasureSnapshot }> {
  const { snapshot, samples } = await readAllConditions(store, experiment, measure, includeExcluded);
  const svg = renderDistributionChart({
    measureLabel: measure.label,
    scale: { min: measure.min, max: measure.max, integer: measure.integer },
    groups: samples.map((s, i) => distributionGroupFromSample(experiment.conditions[i].label, s, { ...describe(s), shapiroWilk: null })),
    id: `omnibus-chart-${measure.id}`,
  });
  return { svg, snapshot };
}
