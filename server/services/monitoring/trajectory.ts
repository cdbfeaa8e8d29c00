/**
 * The trajectory of the anytime-valid p and interval (confidence sequence) over the answers in arrival order: the
 * points of trajectory-points.ts at up to TRAJECTORY_POINTS evenly spaced prefixes, with the 30-answer floor per
 * condition of the monitoring block (points before it are `provisional`), and the reply body of the trajectory
 * route.
 *
 * Where it runs: when the store engine can read the arrival order on a worker thread's own connection (the SQLite
 * store on a file; SortedRunsReader.workerReads), the read and the O(n) pass both run in the comparison worker pool
 * and only the points come back; otherwise (an in-memory database, another engine, a worker that failed) the same
 * code runs in-thread. The comparison service caches the body per (experiment, definition, measure, pair,
 * dataVersion) with a strong ETag, and concurrent identical requests share one computation
 * (comparisons/service.ts: trajectory, trajectoryChart).
 *
 * Cost: one O(n log n) read and an O(n) pass per dataVersion (cache misses only); O(TRAJECTORY_POINTS) afterwards.
 */
import { anytimeValid, DEFAULT_TARGET_PER_CONDITION } from '../../../stats/sequential.js';
import type { ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';
import type { ComparePool } from '../comparisons/worker-pool.js';
import { FLOOR_PER_CONDITION, trajectoryPoints, type TrajectoryOptions, type TrajectoryPointView } from './trajectory-points.js';

export type { TrajectoryPointView } from './trajectory-points.js';

/** Most points of a trajectory. */
export const TRAJECTORY_POINTS = 60;

/** Answers per condition before a trajectory point counts as evidence (the monitoring block's floor). */
export const TRAJECTORY_FLOOR_PER_CONDITION = FLOOR_PER_CONDITION;

export interface TrajectoryBody {
  experiment: string;
  measure: string;
  a: string;
  b: string;
  dataVersion: number;
  alpha: number;
  method: string;
  mixing: number;
  targetPerCondition: number;
  plannedPerCondition: number | null;
  floorPerCondition: number;
  points: TrajectoryPointView[];
}

export interface TrajectoryTarget {
  experiment: ExperimentRecord;
  measure: MeasureRecord;
  a: { key: number; id: string };
  b: { key: number; id: string };
}

/**
 * The trajectory body of a (measure, pair): the points, read and computed in a worker when the engine allows it
 * (see the header), else in-thread.
 */
export async function computeTrajectory(store: Store, t: TrajectoryTarget, pool: ComparePool | null, maxPoints = TRAJECTORY_POINTS): Promise<TrajectoryBody> {
  const e = t.experiment;
  const options: TrajectoryOptions = {
    alpha: e.alpha,
    plannedPerCondition: e.plannedPerCondition,
    maxPoints,
    floorPerCondition: TRAJECTORY_FLOOR_PER_CONDITION,
  };
  const conditionKeys: [number, number] = [t.a.key, t.b.key];
  const inThread = async () => {
    const arrival = await store.looks.getArrivalValues(t.measure.key, conditionKeys);
    return { dataVersion: arrival.dataVersion, points: trajectoryPoints(arrival, options) };
  };
  const where = store.responses.sortedRuns?.workerReads ?? null;
  const result =
    pool && where
      ? await pool
          .run({ kind: 'trajectory', module: where.module, source: where.source, measureKey: t.measure.key, conditionKeys, options })
          .catch(() => {
            pool.stats.fallbacks++;
            return inThread();
          })
      : await inThread();
  const ref = anytimeValid({ na: 0, meanA: 0, varA: 0, nb: 0, meanB: 0, varB: 0 }, options);
  return {
    experiment: e.id,
    measure: t.measure.id,
    a: t.a.id,
    b: t.b.id,
    dataVersion: result.dataVersion,
    alpha: e.alpha,
    method: ref.method,
    mixing: ref.mixing,
    targetPerCondition: e.plannedPerCondition ?? DEFAULT_TARGET_PER_CONDITION,
    plannedPerCondition: e.plannedPerCondition,
    floorPerCondition: TRAJECTORY_FLOOR_PER_CONDITION,
    points: result.points,
  };
}
