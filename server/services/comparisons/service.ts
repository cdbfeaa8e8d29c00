/**
 * The comparison service: resolve a measure and a pair of conditions, read one consistent snapshot, build the two
 * Samples, run stats, add the quality flags and the monitoring block, and cache the result.
 *
 * Reads. Integer measures read per-value counts (value_counts, kept up to date by ingest, exclusion and erasure;
 * O(distinct values), never a scan of raw rows) → fromCounts; continuous measures read their values in order
 * straight from the index (measure, condition, excluded, value) into a Float64Array → fromSortedValues. Both
 * snapshots read the values, the dataVersion, the per-condition counters and the rejected counts in ONE read
 * transaction, so every number in a reply belongs to one dataVersion. (An integer measure wider than
 * MAX_DENSE_COUNTS values is read as sorted values instead.)
 *
 * Caching and polling. A result depends on: the experiment (key and definition time `updatedAt`, which moves
 * with every PATCH: alpha, thresholds, planned size, labels), the measure, the pair, the options (alternative,
 * confidenceLevel, includeExcluded), the dataVersion and the rejected-value total of the experiment (values refused
 * at ingest are counted without moving the dataVersion, yet they feed the out_of_range flag) and the number of
 * recorded interim looks (a look changes the monitoring block without moving the dataVersion). The cache key and the
 * strong ETag are built from exactly these, plus CACHE_FORMAT (bumped when the reply's numbers or shape change).
 * `getComparisonStamp` reads the dataVersion, rejected total and look count with one cheap query, so If-None-Match is answered
 * (304) without reading values or computing anything. After new data arrive the dataVersion moves: every key of
 * the older version simply misses and ages out of the LRU; a poll recomputes only the entry it asks for (other
 * measures are recomputed when they are asked for, not before). Two replies with the same ETag carry the same
 * numbers; only `computedAt` can differ, when an entry was evicted and computed again.
 *
 * The LRU cache is bounded by entries and by an estimate of bytes (twice the JSON length, UTF-16), one per app
 * (the app's `app.comparisons`), shared by the comparison routes and by the CSV export (`familyBody`). Identical
 * requests that miss at the same time share one computation.
 */
import { createHash } from 'node:crypto';
import { computeFlags, type FlagContext } from '../../../stats/flags.js';
import { adjustPValues, type AdjustMethod } from '../../../stats/adjust.js';
import { compareSamples, fromCounts, type Alternative, type ConditionsComparison } from '../../../stats/index.js';
import type { ComparisonStamp, ExperimentRecord, MeasureRecord, MeasureSnapshot, RunsSnapshot, Store } from '../../store/types.js';
import { COMPARE_WORKER_MIN_DEFAULT } from '../../config.js';
import { readSnapshot, readsCounts } from '../samples.js';
import { LruCache } from './cache.js';
import {
  chartGroups,
  compareGroups,
  omnibusGroups,
  shareable,
  sharedComparePool,
  type ChartTask,
  type ComparePool,
  type CompareResult,
  type CompareTask,
  type OmnibusTask,
} from './worker-pool.js';
import { computeMonitoring } from '../monitoring/interim.js';
import { computeTrajectory, type TrajectoryBody } from '../monitoring/trajectory.js';
import { renderTrajectoryChart } from '../../views/charts/trajectory.js';
import { experimentNotFound, familyTargets, type ComparisonTarget } from '../targets.js';
import { ComparisonSchema, FamilyEntrySchema, FamilySchema, type ComparisonBody, type FamilyBody, type FamilyEntry } from '../../schemas/comparisons.js';
import { z } from 'zod';
import { comparisonBody, flagContext } from './reply.js';
import { computeOmnibus, renderOmnibusChart, type OmnibusOptions } from './omnibus.js';
import { declaredMargin } from './margin.js';
import type { OmnibusBody } from '../../schemas/omnibus.js';

/** The margin a pairwise comparison uses: the checked override when given, else the measure's declared margin. */
function effectiveMargin(t: ComparisonTarget, o: ComparisonOptions): number | null {
  return o.margin !== undefined ? o.margin : declaredMargin(t.experiment, t.measure);
}
import { valuesInWeighted, computeWeighted, weightedFromSnapshot, type WeightedInput } from './weighted.js';
import { adjustedFromRows, computeAdjusted, type AdjustedInput } from './adjusted.js';
import type { AdjustedBlock } from '../../schemas/weighted.js';

import { primaryOf, roleOf } from '../measure-roles.js';
import { flaggedAnswers } from './flagged-answers.js';
import { ProblemError } from '../../errors.js';

/**
 * What the work on a snapshot's groups grows with, in the unit of workerMinValues: the values the arrays hold — the
 * sorted values of a continuous item (summaries, ranks, the chart's O(n) pass), or the per-value counts of an integer
 * item (its statistics cost O(distinct values) whatever the number of answers: 2–10 ms of CPU for a 0–100 item, so
 * those stay in-thread unless the scale is thousands of values wide). O(groups).
 */
function valuesHeld(groups: readonly Float64Array[]): number {
  let n = 0;
  for (const g of groups) n += g.length;
  return n;
}

/** Dots a box plot draws per group at most (distributionGroupFromSample's evenly spaced subsample). */
const CHART_DOTS_PER_GROUP = 2000;

/**
 * What drawing a box plot grows with, in the unit of workerMinValues: the sorted values of a continuous item (O(n)
 * summaries and whiskers, then its dots), or for an integer item read as counts the dots it draws (up to 2,000 a group:
 * formatting them is most of the time) plus its per-value counts. O(groups × counts).
 */
function chartCost(task: Omit<ChartTask, 'kind'>): number {
  if (!task.counts) return valuesHeld(task.groups);
  let cost = 0;
  for (const g of task.groups) {
    let n = 0;
    for (let k = 0; k < g.length; k++) n += g[k];
    cost += g.length + Math.min(n, CHART_DOTS_PER_GROUP);
  }
  return cost;
}

/**
 * What one pair of conditions adds to the cost of an omnibus, in the unit of workerMinValues: its Games–Howell
 * p-value (a studentized-range integral) and Dunn test take ≈ 3 ms of CPU whatever the group sizes (8 conditions of a
 * 0–10 item, 28 pairs: 75–83 ms of CPU, 100–160 ms of the request thread on a loaded machine), about as long as the
 * work on 2,000 sorted values. So an omnibus of three or more conditions runs in the worker pool at the default
 * minimum (4,000).
 */
export const OMNIBUS_PAIR_COST = 2000;

/** Let timers and I/O run between two slices of a long computation (each slice stays well under ~50 ms). */
const nextTurn = (): Promise<void> => new Promise((resolve) => setImmediate(resolve));

/**
 * The family's JSON text exactly as the route's reply schema would write it (encode through the zod schema, then
 * JSON.stringify), one entry at a time with a turn of the event loop in between: a family of a few hundred entries
 * is ~1.5 MB, whose serialisation in one piece blocked the loop for ~60 ms on every request, cache hit or not.
 * FamilySchema ends with `comparisons`, so the head is encoded with an empty list and the entries spliced in.
 */
async function familyJson(body: FamilyBody): Promise<string> {
  const head = JSON.stringify(z.encode(FamilySchema, { ...body, comparisons: [] }));
  if (!head.endsWith('"comparisons":[]}')) throw new Error('FamilySchema must end with comparisons');
  const parts: string[] = [];
  for (const entry of body.comparisons) {
    parts.push(JSON.stringify(z.encode(FamilyEntrySchema, entry)));
    await nextTurn();
  }
  return `${head.slice(0, -2)}${parts.join(',')}]}`;
}

/**
 * Refuse a family larger than MAX_FAMILY_COMPARISONS (measures × pairs) with a 422 naming the cap and how to narrow
 * the request. `what` names the request in the detail.
 */
export function assertFamilySize(experiment: ExperimentRecord, pairs: 'first' | 'all', includeCovariates: boolean, what: string): void {
  const size = familyTargets(experiment, pairs, includeCovariates).length;
  if (size <= MAX_FAMILY_COMPARISONS) return;
  const k = experiment.conditions.length;
  const measures = size / (pairs === 'all' ? (k * (k - 1)) / 2 : 1);
  throw new ProblemError(
    'family-too-large',
    `${what} would hold ${size} comparisons (${measures} measures × ${size / measures} pairs of conditions); the limit is ` +
      `${MAX_FAMILY_COMPARISONS} per request. Narrow it: ask for pairs=first, or one measure at a time ` +
      '(GET /v1/experiments/{id}/comparisons/{measure}?a=&b=, or …/comparisons/{measure}/omnibus for every pair of one measure).',
  );
}

/** Bump when a change to stats or to the reply changes what the same data produce (invalidates every ETag). */
export const CACHE_FORMAT = 4;
/**
 * The largest family one request may ask for, counted in comparisons (measures × pairs of conditions): GET
 * …/comparisons, comparisons.csv and omnibus.csv above it are refused (422 family-too-large) before anything is read.
 * 500 is the most measures a definition may hold, so every pairs=first family (the default, and the team overview's)
 * stays allowed; it covers 50 measures with 5 conditions (10 pairs), and bounds one family to ~2.5 MB of JSON
 * computed in slices of one comparison and cached as text (tests/bench/read-cost.ts). The definition allows 50
 * conditions (1,225 pairs): such families are refused.
 */
export const MAX_FAMILY_COMPARISONS = 500;
export const DEFAULT_CACHE_LIMITS = Object.freeze({ maxEntries: 2000, maxBytes: 64 * 1024 * 1024 });
/** What the service reports for every comparison or chart it answers (the app passes its metrics here). */
export interface ComparisonEvent {
  /** True when the answer came from the cache (nothing was computed). */
  cacheHit: boolean;
  /** Time spent computing (cache misses), seconds. */
  durationSeconds?: number;
}

export interface ComparisonServiceOptions {
  /** Values from which continuous work goes to a worker thread (config.compareWorkerMinValues; default COMPARE_WORKER_MIN_DEFAULT). */
  workerMinValues?: number;
  /** The worker pool (default: the process-wide one). */
  pool?: ComparePool;
  /** Called once per answered comparison or chart. */
  onComparison?: (event: ComparisonEvent) => void;
}

export interface ComparisonOptions {
  alternative: Alternative;
  confidenceLevel: number;
  includeExcluded: boolean;
  /** Equivalence margin: a checked `?margin=` override; undefined means the measure's declared margin (if any). */
  margin?: number | null;
}

export const DEFAULT_COMPARISON_OPTIONS: Readonly<ComparisonOptions> = Object.freeze({
  alternative: 'two-sided',
  confidenceLevel: 0.95,
  includeExcluded: false,
});

export interface FamilyOptions extends ComparisonOptions {
  pairs: 'first' | 'all';
  adjust: AdjustMethod;
  /** Compare covariates too (default false: a family lists outcomes only). */
  includeCovariates?: boolean;
}

type Stamp = ComparisonStamp;

// ---------------------------------------------------------------------------------------------------------
// The service
// ---------------------------------------------------------------------------------------------------------

/** `key` is the key the value was really computed for (its dataVersion may be newer than the one asked for). */
type CachedValue =
  | { kind: 'comparison'; key: string; body: ComparisonBody }
  | { kind: 'chart'; key: string; svg: string }
  | { kind: 'omnibus'; key: string; body: OmnibusBody }
  | { kind: 'trajectory'; key: string; body: TrajectoryBody }
  | { kind: 'trajectory-chart'; key: string; svg: string }
  | { kind: 'adjusted'; key: string; dataVersion: number; block: AdjustedBlock }
  | { kind: 'family'; key: string; body: FamilyBody; etag: string; json: string };

export interface ComparisonReply {
  body: ComparisonBody;
  etag: string;
}

function tagOf(key: string): string {
  return `"${createHash('sha256').update(key).digest('base64url').slice(0, 32)}"`;
}

export class ComparisonService {
  readonly cache: LruCache<CachedValue>;
  private readonly inflight = new Map<string, Promise<CachedValue>>();

  private readonly workerMinValues: number;
  private readonly pool: ComparePool | null;
  private readonly onComparison: (event: ComparisonEvent) => void;
  /** Where the heavy steps ran (tests and benchmarks). */
  readonly paths = { workerReads: 0, workerComputes: 0, inThreadComputes: 0, trajectories: 0, workerCharts: 0, inThreadCharts: 0 };

  constructor(
    private readonly store: Store,
    limits: { maxEntries: number; maxBytes: number } = DEFAULT_CACHE_LIMITS,
    options: ComparisonServiceOptions = {},
  ) {
    this.cache = new LruCache(limits.maxEntries, limits.maxBytes);
    this.workerMinValues = options.workerMinValues ?? COMPARE_WORKER_MIN_DEFAULT;
    this.pool = options.pool ?? null;
    this.onComparison = options.onComparison ?? (() => undefined);
  }

  private workerPool(): ComparePool {
    return this.pool ?? sharedComparePool();
  }

  /** One cheap query: what the cached entries of this experiment depend on besides the definition. */
  async stamp(experiment: ExperimentRecord): Promise<Stamp> {
    const s = await this.store.responses.getComparisonStamp(experiment.key, experiment);
    if (!s) throw experimentNotFound(experiment.id);
    return s;
  }

  comparisonKey(t: ComparisonTarget, o: ComparisonOptions, s: Stamp): string {
    // Everything a reply depends on; see the header.
    const e = t.experiment;
    return [
      'cmp',
      CACHE_FORMAT,
      e.key,
      e.updatedAt,
      t.measure.key,
      t.a.key,
      t.b.key,
      o.alternative,
      o.confidenceLevel,
      o.includeExcluded ? 1 : 0,
      s.dataVersion,
      s.rejectedTotal,
      s.looks,
      effectiveMargin(t, o) ?? '',
    ].join('|');
  }

  /** Everything an omnibus reply depends on (the definition, the measure, the options, the data). */
  omnibusKey(e: ExperimentRecord, m: MeasureRecord, o: OmnibusOptions, s: Pick<Stamp, 'dataVersion'>): string {
    return ['omni', CACHE_FORMAT, e.key, e.updatedAt, m.key, o.includeExcluded ? 1 : 0, o.margin ?? '', s.dataVersion].join('|');
  }

  omnibusChartKey(e: ExperimentRecord, m: MeasureRecord, includeExcluded: boolean, s: Pick<Stamp, 'dataVersion'>): string {
    return ['omni-svg', CACHE_FORMAT, e.key, e.updatedAt, m.key, includeExcluded ? 1 : 0, s.dataVersion].join('|');
  }

  /** Every condition on one measure (omnibus tests, then every pair), from the cache or computed. */
  async omnibus(e: ExperimentRecord, m: MeasureRecord, o: OmnibusOptions, stamp?: Stamp): Promise<{ body: OmnibusBody; etag: string }> {
    const s = stamp ?? (await this.stamp(e));
    const value = await this.cached(this.omnibusKey(e, m, o, s), async () => {
      let inWorker = false;
      const runner = async (task: Omit<OmnibusTask, 'kind'>) => {
        const k = task.groups.length;
        const cost = valuesHeld(task.groups) + ((k * (k - 1)) / 2) * OMNIBUS_PAIR_COST;
        if (cost < this.workerMinValues) return omnibusGroups(task);
        const groups = task.counts ? task.groups : task.groups.map((g) => shareable(g));
        let fellBack = false;
        const r = await this.workerPool().runOr<ConditionsComparison>({ kind: 'omnibus', ...task, groups }, () => {
          fellBack = true;
          return omnibusGroups(task);
        });
        inWorker = !fellBack;
        return r;
      };
      const { body, snapshot } = await computeOmnibus(this.store, e, m, o, runner);
      if (inWorker) this.paths.workerComputes++;
      else this.paths.inThreadComputes++;
      return { kind: 'omnibus', key: this.omnibusKey(e, m, o, snapshot), body };
    });
    if (value.kind !== 'omnibus') throw new Error('cache entry of the wrong kind');
    return { body: value.body, etag: tagOf(value.key) };
  }

  /** The box plot of every condition on one measure (SVG). */
  async omnibusChart(e: ExperimentRecord, m: MeasureRecord, includeExcluded: boolean, stamp?: Stamp): Promise<{ svg: string; etag: string }> {
    const s = stamp ?? (await this.stamp(e));
    const value = await this.cached(this.omnibusChartKey(e, m, includeExcluded, s), async () => {
      const { svg, snapshot } = await renderOmnibusChart(this.store, e, m, includeExcluded, (task) => this.renderChart(task));
      return { kind: 'chart', key: this.omnibusChartKey(e, m, includeExcluded, snapshot), svg };
    });
    if (value.kind !== 'chart') throw new Error('cache entry of the wrong kind');
    return { svg: value.svg, etag: tagOf(value.key) };
  }

  chartKey(t: ComparisonTarget, includeExcluded: boolean, s: Pick<Stamp, 'dataVersion'>, range: 'scale' | 'data' = 'scale'): string {
    const e = t.experiment;
    return ['svg', CACHE_FORMAT, e.key, e.updatedAt, t.measure.key, t.a.key, t.b.key, includeExcluded ? 1 : 0, s.dataVersion, ...(range === 'data' ? ['data'] : [])].join('|');
  }

  /** The trajectory depends on the definition (alpha, planned size), the measure, the pair and the dataVersion. */
  trajectoryKey(t: ComparisonTarget, s: Pick<Stamp, 'dataVersion'>): string {
    const e = t.experiment;
    return ['trajectory', CACHE_FORMAT, e.key, e.updatedAt, t.measure.key, t.a.key, t.b.key, s.dataVersion].join('|');
  }

  /** Its chart also marks the recorded looks, so their number is part of the key. */
  trajectoryChartKey(t: ComparisonTarget, s: Pick<Stamp, 'dataVersion' | 'looks'>): string {
    return ['trajectory-svg', this.trajectoryKey(t, s), s.looks].join('|');
  }

  etagOf(key: string): string {
    return tagOf(key);
  }

  /**
   * The trajectory of the anytime-valid p and interval (services/monitoring/trajectory.ts), cached per dataVersion;
   * the read and the O(n) pass run in the worker pool when the engine allows it.
   */
  async trajectory(t: ComparisonTarget, stamp?: Stamp): Promise<{ body: TrajectoryBody; etag: string }> {
    const s = stamp ?? (await this.stamp(t.experiment));
    const value = await this.cached(this.trajectoryKey(t, s), async () => {
      this.paths.trajectories++;
      const body = await computeTrajectory(this.store, t, this.workerPool());
      return { kind: 'trajectory', key: this.trajectoryKey(t, body), body };
    });
    if (value.kind !== 'trajectory') throw new Error('cache entry of the wrong kind');
    return { body: value.body, etag: tagOf(value.key) };
  }

  /** The trajectory chart (SVG): the cached trajectory plus the recorded looks of the pair. */
  async trajectoryChart(t: ComparisonTarget, stamp?: Stamp): Promise<{ svg: string; etag: string }> {
    const s = stamp ?? (await this.stamp(t.experiment));
    const value = await this.cached(this.trajectoryChartKey(t, s), async () => {
      const { body } = await this.trajectory(t, s);
      const looks = await this.store.looks.list(t.experiment.key, t.measure.key, [t.a.key, t.b.key]);
      const span = t.measure.max - t.measure.min;
      const svg = renderTrajectoryChart({
        alpha: body.alpha,
        points: body.points,
        floorPerCondition: body.floorPerCondition,
        plannedTotal: body.plannedPerCondition === null ? null : 2 * body.plannedPerCondition,
        looks: looks.map((l) => ({ number: l.number, n: l.nA + l.nB })),
        measureLabel: `${t.measure.label} (${t.a.id} − ${t.b.id})`,
        differenceLimits: { lower: -span, upper: span },
        id: `sb-traj-${t.measure.id}`,
      });
      return { kind: 'trajectory-chart', key: this.trajectoryChartKey(t, { dataVersion: body.dataVersion, looks: s.looks }), svg };
    });
    if (value.kind !== 'trajectory-chart') throw new Error('cache entry of the wrong kind');
    return { svg: value.svg, etag: tagOf(value.key) };
  }

  /** The comparison for a target, from the cache or computed (and cached). `stamp` defaults to a fresh one. */
  async comparison(t: ComparisonTarget, o: ComparisonOptions, stamp?: Stamp): Promise<ComparisonReply> {
    const s = stamp ?? (await this.stamp(t.experiment));
    const value = await this.cached(this.comparisonKey(t, o, s), async () => {
      const { body, snapshot } = await this.computeComparison(t, o);
      return { kind: 'comparison', key: this.comparisonKey(t, o, { ...snapshot, looks: s.looks }), body };
    });
    if (value.kind !== 'comparison') throw new Error('cache entry of the wrong kind');
    return { body: value.body, etag: tagOf(value.key) };
  }

  adjustedKey(t: ComparisonTarget, o: ComparisonOptions, covariates: MeasureRecord[], s: Stamp): string {
    return [this.comparisonKey(t, o, s), 'adj', ...covariates.map((c) => c.key)].join('|');
  }

  /**
   * The comparison with the covariate-adjusted block (?covariates=): both cached by dataVersion; when data arrived
   * between the two reads, both are taken again from a fresh stamp (at most 3 times), so the reply belongs to one
   * dataVersion.
   */
  async comparisonWithAdjustment(t: ComparisonTarget, o: ComparisonOptions, covariates: MeasureRecord[], stamp?: Stamp): Promise<ComparisonReply> {
    let s = stamp ?? (await this.stamp(t.experiment));
    let reply: ComparisonReply | null = null;
    for (let attempt = 0; attempt < 3; attempt++) {
      if (attempt > 0) s = await this.stamp(t.experiment);
      const base = await this.comparison(t, o, s);
      const value = await this.cached(this.adjustedKey(t, o, covariates, s), async () => {
        const r = await computeAdjusted(this.store, t, covariates, o, (input) => this.fitAdjusted(input));
        return { kind: 'adjusted', key: this.adjustedKey(t, o, covariates, { ...s, dataVersion: r.dataVersion }), dataVersion: r.dataVersion, block: r.block };
      });
      if (value.kind !== 'adjusted') throw new Error('cache entry of the wrong kind');
      reply = { body: { ...base.body, adjusted: value.block }, etag: tagOf(value.key) };
      if (value.dataVersion === base.body.dataVersion) break;
    }
    return reply!;
  }

  /** The distribution chart (SVG) of a target. */
  async chart(t: ComparisonTarget, includeExcluded: boolean, stamp?: Stamp, range: 'scale' | 'data' = 'scale'): Promise<{ svg: string; etag: string }> {
    const s = stamp ?? (await this.stamp(t.experiment));
    const value = await this.cached(this.chartKey(t, includeExcluded, s, range), async () => {
      const counts = readsCounts(t.measure);
      const snapshot = counts ? await readSnapshot(this.store, t.measure, [t.a.key, t.b.key], includeExcluded) : await this.readSortedSnapshot(t, includeExcluded);
      const svg = await this.renderChart({
        groups: snapshot.groups,
        ...(counts ? { counts: { min: t.measure.min } } : {}),
        labels: [t.a.label, t.b.label],
        measureLabel: t.measure.label,
        scale: { min: t.measure.min, max: t.measure.max, integer: t.measure.integer },
        id: `chart-${t.measure.id}${range === 'data' ? '-data' : ''}`,
        range,
      });
      return { kind: 'chart', key: this.chartKey(t, includeExcluded, snapshot, range), svg };
    });
    if (value.kind !== 'chart') throw new Error('cache entry of the wrong kind');
    return { svg: value.svg, etag: tagOf(value.key) };
  }

  /**
   * Every measure for the first pair or for every pair, with p-values adjusted across the whole family. All entries
   * belong to one dataVersion: when data arrive during the computation, it starts again (at most 3 times; after
   * that, entries may differ and the top-level dataVersion is the newest).
   */
  async family(experiment: ExperimentRecord, options: FamilyOptions, stamp?: Stamp): Promise<{ body: FamilyBody; etag: string; json: string }> {
    assertFamilySize(experiment, options.pairs, options.includeCovariates ?? false, `This family (pairs=${options.pairs})`);
    const s = stamp ?? (await this.stamp(experiment));
    // The whole family is cached under its ETag seed (identical concurrent requests share one computation), so a
    // repeated family costs one lookup, not one per entry.
    const key = this.familyKey(experiment, options, s);
    const value = await this.cached(key, async () => ({ kind: 'family', ...(await this.computeFamily(experiment, options, s)) }));
    if (value.kind !== 'family') throw new Error('cache entry of the wrong kind');
    return { body: value.body, etag: value.etag, json: value.json };
  }

  /** `key`: the cache key of the stamp the entries really belong to (a newer one when data arrived meanwhile). */
  private async computeFamily(experiment: ExperimentRecord, options: FamilyOptions, stamp: Stamp): Promise<{ key: string; body: FamilyBody; etag: string; json: string }> {
    let s = stamp;
    const targets = familyTargets(experiment, options.pairs, options.includeCovariates ?? false);
    let entries: ComparisonReply[] = [];
    let consistent = false;
    for (let attempt = 0; attempt < 3 && !consistent; attempt++) {
      if (attempt > 0) s = await this.stamp(experiment);
      entries = [];
      for (const t of targets) {
        entries.push(await this.comparison(t, options, s));
        await nextTurn();
      }
      const expected = s;
      consistent = entries.every((e, i) => e.etag === tagOf(this.comparisonKey(targets[i], options, expected)));
    }
    // The adjusted family is the outcome measures only: process measures (and any other role) are compared and
    // shown, but their p-values are neither adjusted nor counted in the family (services/measure-roles.ts).
    const roles = targets.map((t) => roleOf(experiment, t.measure.id));
    const inFamily = roles.map((r) => r === 'outcome');
    const members = entries.filter((_, i) => inFamily[i]);
    const welch = adjustPValues(
      members.map((e) => e.body.welch.p),
      options.adjust,
    );
    const rankSum = adjustPValues(
      members.map((e) => e.body.mannWhitney.p),
      options.adjust,
    );
    const primary = primaryOf(experiment);
    let m = 0;
    const comparisons: FamilyEntry[] = entries.map((e, i) => {
      const adjusted: FamilyEntry['adjusted'] = inFamily[i]
        ? { welchP: welch[m], mannWhitneyP: rankSum[m], method: options.adjust }
        : { welchP: null, mannWhitneyP: null, method: options.adjust, reason: `A ${roles[i]} measure is not part of the adjusted family (outcome measures only).` };
      if (inFamily[i]) m++;
      return { ...e.body, role: roles[i], primary: targets[i].measure.id === primary, adjusted };
    });
    const adjustedFamily = {
      roles: ['outcome' as const],
      measures: [...new Set(targets.filter((_, i) => inFamily[i]).map((t) => t.measure.id))],
      size: members.length,
      description: `${options.adjust === 'none' ? 'No adjustment' : `${options.adjust === 'holm' ? 'Holm' : 'Benjamini–Hochberg'} adjustment`} over the ${members.length} outcome comparison${members.length === 1 ? '' : 's'}; process measures are not in the family.`,
    };
    const dataVersion = Math.max(...entries.map((e) => e.body.dataVersion));
    const body: FamilyBody = { experiment: experiment.id, dataVersion, adjust: options.adjust, pairs: options.pairs, adjustedFamily, comparisons };
    const key = consistent ? this.familyKey(experiment, options, s) : ['family-mixed', options.pairs, options.adjust, ...entries.map((e) => e.etag)].join('\n');
    return { key, body, etag: tagOf(key), json: await familyJson(body) };
  }

  /**
   * The family's body with the defaults of the CSV export (first pair, Holm) for whatever `options` leaves out: the
   * same numbers GET /v1/experiments/{id}/comparisons answers, from the same cache.
   */
  async familyBody(experiment: ExperimentRecord, options: Partial<FamilyOptions> = {}): Promise<FamilyBody> {
    const full: FamilyOptions = { ...DEFAULT_COMPARISON_OPTIONS, pairs: 'first', adjust: 'holm', ...options };
    return (await this.family(experiment, full)).body;
  }

  /** The family's ETag from the stamp alone (for the 304 check before anything is computed). */
  familyEtagFromStamp(experiment: ExperimentRecord, options: FamilyOptions, s: Stamp): string {
    return tagOf(this.familyKey(experiment, options, s));
  }

  private familyKey(experiment: ExperimentRecord, options: FamilyOptions, s: Stamp): string {
    const keys = familyTargets(experiment, options.pairs, options.includeCovariates ?? false).map((t) => this.comparisonKey(t, options, s));
    return ['family', options.pairs, options.adjust, ...keys].join('\n');
  }

  /** Look up `key`; on a miss compute once (concurrent identical misses share the computation) and cache. */
  private async cached(key: string, compute: () => Promise<CachedValue>): Promise<CachedValue> {
    const hit = this.cache.get(key);
    if (hit) {
      this.onComparison({ cacheHit: true });
      return hit;
    }
    const running = this.inflight.get(key);
    if (running) return running;
    const promise = (async () => {
      try {
        const started = performance.now();
        const value = await compute();
        this.onComparison({ cacheHit: false, durationSeconds: (performance.now() - started) / 1000 });
        const bytes =
          'svg' in value ? value.svg.length * 2 : 'json' in value ? value.json.length * 2 : JSON.stringify('block' in value ? value.block : value.body).length * 2;
        this.cache.set(value.key, value, bytes);
        return value;
      } finally {
        this.inflight.delete(key);
      }
    })();
    this.inflight.set(key, promise);
    return promise;
  }

  /**
   * The statistics of a weighted block: in the worker pool when its snapshot holds at least workerMinValues values
   * (a continuous item's weighted answers are sorted to build the samples), else in-thread. The same function either way.
   */
  private async weightedStats(input: WeightedInput): Promise<ReturnType<typeof weightedFromSnapshot>> {
    if (valuesInWeighted(input.snapshot) < this.workerMinValues) {
      return weightedFromSnapshot(input);
    }
    let fellBack = false;
    const r = await this.workerPool().runOr<ReturnType<typeof weightedFromSnapshot>>({ kind: 'weighted', ...input }, () => {
      fellBack = true;
      return weightedFromSnapshot(input);
    });
    if (!fellBack) this.paths.workerComputes++;
    return r;
  }

  /**
   * Lin's covariate-adjusted fit, O(n·p²) with p = 2 + 2k: in the worker pool when rows × (1 + covariates) reach
   * workerMinValues, else in-thread. The same function either way.
   */
  private async fitAdjusted(input: AdjustedInput): Promise<ReturnType<typeof adjustedFromRows>> {
    if (input.rows.outcome.length * (1 + input.covariateNames.length) < this.workerMinValues) {
      return adjustedFromRows(input);
    }
    let fellBack = false;
    const r = await this.workerPool().runOr<ReturnType<typeof adjustedFromRows>>({ kind: 'adjusted', ...input }, () => {
      fellBack = true;
      return adjustedFromRows(input);
    });
    if (!fellBack) this.paths.workerComputes++;
    return r;
  }

  /**
   * A box plot's SVG: drawn in the worker pool when its cost (chartCost) reaches workerMinValues — two continuous
   * groups of 20,000 (O(n) summaries and whiskers, 2,000 formatted dots a group: 10–16 ms of CPU, 50–200 ms of the
   * request thread on a loaded machine: tests/bench/read-cost.ts --cpu-prof), or an integer item with 2,000 answers
   * or more in all (≈ 5 ms of CPU for 4,000 dots, 40–65 ms on that machine) — else in-thread. The same function
   * either way, so the text is the same.
   */
  private async renderChart(task: Omit<ChartTask, 'kind'>): Promise<string> {
    if (chartCost(task) < this.workerMinValues) {
      this.paths.inThreadCharts++;
      return chartGroups(task);
    }
    const groups = task.counts ? task.groups : task.groups.map((g) => shareable(g));
    let fellBack = false;
    const svg = await this.workerPool().runOr<string>({ kind: 'chart', ...task, groups }, () => {
      fellBack = true;
      return chartGroups(task);
    });
    if (fellBack) this.paths.inThreadCharts++;
    else this.paths.workerCharts++;
    return svg;
  }

  /**
   * The sorted snapshot of a continuous measure. getSortedValuesSnapshot serves it from the repository's
   * sorted-values cache (merging the rows that arrived since); only when runs of at least workerMinValues values
   * must be read whole (first read, or after an exclusion or erasure) are they read in a worker thread and adopted
   * into the cache.
   */
  private async readSortedSnapshot(t: ComparisonTarget, includeExcluded: boolean): Promise<MeasureSnapshot> {
    const keys = [t.a.key, t.b.key];
    const reader = this.store.responses.sortedRuns;
    if (reader && reader.fullReadEstimate(t.measure.key, keys, includeExcluded) >= this.workerMinValues) {
      const where = reader.workerReads;
      if (where) {
        const runs = await this.workerPool().runOr<RunsSnapshot | null>(
          { kind: 'read', module: where.module, source: where.source, measureKey: t.measure.key, conditionKeys: keys, includeExcluded },
          () => null,
        );
        if (runs) {
          this.paths.workerReads++;
          return reader.adoptRunsSnapshot(t.measure.key, keys, includeExcluded, runs);
        }
      }
    }
    return this.store.responses.getSortedValuesSnapshot(t.measure.key, keys, includeExcluded);
  }

  /**
   * Stats, flags, the sensitivity view and (with a margin) the equivalence tests of a comparison: in a worker when
   * the two groups hold at least workerMinValues values (sorted values; or per-value counts of an integer item whose
   * scale is that wide), else in-thread (an integer item of a usual scale: 2–10 ms of CPU at any n, which a worker's
   * queue would only delay). The same function either way.
   */
  private async compareAndFlag(
    t: ComparisonTarget,
    o: ComparisonOptions,
    snapshot: MeasureSnapshot,
    tost: { margin: number; alpha: number } | null,
  ): Promise<CompareResult> {
    const counts = readsCounts(t.measure);
    const [ga, gb] = snapshot.groups;
    const task: Omit<CompareTask, 'kind'> = {
      a: ga,
      b: gb,
      ...(counts ? { counts: { min: t.measure.min } } : {}),
      alternative: o.alternative,
      confidenceLevel: o.confidenceLevel,
      flagContext: flagContext(t, snapshot, o.includeExcluded),
      ...(tost ? { equivalence: tost } : {}),
    };
    if (valuesHeld([ga, gb]) < this.workerMinValues) {
      this.paths.inThreadComputes++;
      return compareGroups(task);
    }
    const shared = counts ? task : { ...task, a: shareable(ga), b: shareable(gb) };
    let inThread = false;
    const r = await this.workerPool().runOr<CompareResult>({ kind: 'compare', ...shared }, () => {
      inThread = true;
      return compareGroups(task);
    });
    if (inThread) this.paths.inThreadComputes++;
    else this.paths.workerComputes++;
    return r;
  }

  /**
   * The comparison, with the weighted block of an experiment with weights. The weighted answers are read in their own
   * read transaction; when data arrived in between (another dataVersion) the whole computation starts again (at
   * most 3 times), so every number of a reply belongs to one dataVersion.
   */
  private async computeComparison(t: ComparisonTarget, o: ComparisonOptions): Promise<{ body: ComparisonBody; snapshot: MeasureSnapshot }> {
    let last = await this.computeOnce(t, o);
    for (let attempt = 1; attempt < 3 && !last.consistent; attempt++) last = await this.computeOnce(t, o);
    return { body: last.body, snapshot: last.snapshot };
  }

  private async computeOnce(
    t: ComparisonTarget,
    o: ComparisonOptions,
  ): Promise<{ body: ComparisonBody; snapshot: MeasureSnapshot; consistent: boolean }> {
    const { experiment: e, measure: m } = t;
    const keys = [t.a.key, t.b.key];
    const snapshot = readsCounts(m) ? await readSnapshot(this.store, m, keys, o.includeExcluded) : await this.readSortedSnapshot(t, o.includeExcluded);
    const margin = effectiveMargin(t, o);
    const { cmp, flags: unweightedFlags, sensitivity, equivalence: tost } = await this.compareAndFlag(t, o, snapshot, margin === null ? null : { margin, alpha: e.alpha });
    const weighted = await computeWeighted(this.store, t, o, cmp, (input) => this.weightedStats(input));
    const flags = weighted ? [...unweightedFlags, ...weighted.flags] : unweightedFlags;
    const ga = cmp.groups.a;
    const gb = cmp.groups.b;
    const monitoring = await computeMonitoring({
      store: this.store,
      experiment: e,
      measureKey: m.key,
      conditionKeys: [t.a.key, t.b.key],
      a: { n: ga.n, mean: ga.mean, variance: ga.sd === null ? null : ga.sd * ga.sd },
      b: { n: gb.n, mean: gb.mean, variance: gb.sd === null ? null : gb.sd * gb.sd },
      welch: { t: cmp.welch.t, df: cmp.welch.df },
      alpha: e.alpha,
      dataVersion: snapshot.dataVersion,
      includeExcluded: o.includeExcluded,
    });
    const flagged = await flaggedAnswers(this.store, t, flags, o.includeExcluded);
    const body = comparisonBody({ experiment: e.id, measure: m.id, a: t.a.id, b: t.b.id }, snapshot.dataVersion, { cmp, flags, sensitivity }, monitoring, {
      weighted: weighted?.block ?? null,
      flaggedAnswers: flagged,
    });
    // The two TOSTs on the same Samples as the comparison (computed with it, in the worker when it ran there).
    if (margin !== null) body.equivalence = tost as ComparisonBody['equivalence'];
    return { body, snapshot, consistent: weighted === null || weighted.dataVersion === snapshot.dataVersion };
  }
}

/**
 * Once per served process (cli/serve.ts calls it after listening): run the stats code on small invented samples, in-thread and in a worker (which starts
 * it), so that the first real comparison after a restart does not also pay for V8's lazy compilation and the
 * worker's start-up (~0.1–0.3 s measured by tests/bench/comparisons.ts "cold"). Failures are ignored.
 */
export function warmUp(pool: ComparePool = sharedComparePool()): void {
  try {
    // A 0–100 item with ~2,000 answers per group, through stats, the flags and the reply's schema (zod compiles
    // its fast path on first use: ~50 ms measured on the first reply otherwise).
    const counts = Array.from({ length: 101 }, (_, k) => Math.round(40 * Math.exp(-(((k - 50) / 18) ** 2) / 2)));
    const a = fromCounts(counts, 0, 'a');
    const b = fromCounts(counts.slice().reverse().map((c, k) => c + (k % 3)), 0, 'b');
    const ctx: FlagContext = { alpha: 0.05, labels: { a: 'a', b: 'b' }, scale: { min: 0, max: 100, integer: true } };
    const cmp = compareSamples(a, b);
    const flags = computeFlags(cmp, { a, b }, ctx);
    ComparisonSchema.safeParse(comparisonBody({ experiment: 'warm-up', measure: 'warm-up', a: 'a', b: 'b' }, 0, { cmp, flags }, null));
    const n = 2000;
    const x = new Float64Array(new SharedArrayBuffer(n * 8));
    const y = new Float64Array(new SharedArrayBuffer(n * 8));
    for (let i = 0; i < n; i++) {
      x[i] = i / n;
      y[i] = (i + 0.5) / n;
    }
    const task = { a: x, b: y, alternative: 'two-sided' as const, confidenceLevel: 0.95, flagContext: { ...ctx, scale: { min: 0, max: 1, integer: false } } };
    compareGroups(task);
    void pool
      .run({ kind: 'compare', ...task })
      .catch(() => undefined);
  } catch {
    // a warm-up is an optimisation only
  }
}
