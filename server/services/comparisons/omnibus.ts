/**
 * The omnibus comparison of every condition of an experiment on one measure (three or more conditions; two work
 * too): one consistent snapshot of all conditions by the read rule (per-value counts for an integer measure,
 * O(distinct values × conditions); sorted values for a continuous one), then stats' compareConditionSamples —
 * Welch's and the classic ANOVA, Kruskal–Wallis, every pair by Games–Howell and Dunn, the equivalence tests of
 * every pair when a margin is known, and the omnibus flags. Caching (by dataVersion, with an ETag) is the
 * comparison service's (service.ts `omnibus`); so is the choice to run the stats in its worker pool (the `runner`:
 * three conditions of 100,000 values with a margin take ≈ 0.6 s of CPU; an integer item of 8 conditions, read as
 * counts, ≈ 0.1–0.16 s, nearly all of it the 28 Games–Howell p-values), and the box plot's rendering (the `chart`
 * renderer). Both runners take the snapshot's groups as they are read (per-value counts or sorted values).
 */
import type { ConditionsComparison } from '../../../stats/index.js';
import { chartGroups, omnibusGroups, type ChartTask, type OmnibusTask } from './worker-pool.js';
import { welchOmegaSquared } from '../../../stats/welch-anova-effect.js';
import type { ExperimentRecord, MeasureRecord, MeasureSnapshot, Store } from '../../store/types.js';
import { readSnapshot, readsCounts } from '../samples.js';
import type { OmnibusBody } from '../../schemas/omnibus.js';

/** Where the stats of an omnibus run (the service passes its worker pool; in-thread when absent). */
export type OmnibusRunner = (task: Omit<OmnibusTask, 'kind'>) => Promise<ConditionsComparison>;

/** Where a box plot is drawn (the service passes its worker pool; in-thread when absent). */
export type ChartRenderer = (task: Omit<ChartTask, 'kind'>) => Promise<string>;

const inThreadOmnibus: OmnibusRunner = async (task) => omnibusGroups(task);
const inThreadChart: ChartRenderer = async (task) => chartGroups(task);

export interface OmnibusOptions {
  includeExcluded: boolean;
  /** The equivalence margin (already resolved and checked), or null. */
  margin: number | null;
}

/** One snapshot of every condition of the experiment, in definition order, by the read rule. */
export async function readAllConditions(store: Store, experiment: ExperimentRecord, measure: MeasureRecord, includeExcluded: boolean): Promise<MeasureSnapshot> {
  return readSnapshot(store, measure, experiment.conditions.map((c) => c.key), includeExcluded);
}

/** The form of the snapshot's groups for a worker task: per-value counts from the scale's minimum, or sorted values. */
function formOf(measure: MeasureRecord): { counts?: { min: number } } {
  return readsCounts(measure) ? { counts: { min: measure.min } } : {};
}

/** The omnibus reply for every condition of `experiment` on `measure`. */
export async function computeOmnibus(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  options: OmnibusOptions,
  runner: OmnibusRunner = inThreadOmnibus,
): Promise<{ body: OmnibusBody; snapshot: MeasureSnapshot }> {
  const snapshot = await readAllConditions(store, experiment, measure, options.includeExcluded);
  const labels = experiment.conditions.map((c) => c.label);
  const cmp = await runner({ groups: snapshot.groups, ...formOf(measure), labels, alpha: experiment.alpha, margin: options.margin });
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
  chart: ChartRenderer = inThreadChart,
): Promise<{ svg: string; snapshot: MeasureSnapshot }> {
  const snapshot = await readAllConditions(store, experiment, measure, includeExcluded);
  const svg = await chart({
    groups: snapshot.groups,
    ...formOf(measure),
    labels: experiment.conditions.map((c) => c.label),
    measureLabel: measure.label,
    scale: { min: measure.min, max: measure.max, integer: measure.integer },
    id: `omnibus-chart-${measure.id}`,
  });
  return { svg, snapshot };
}
