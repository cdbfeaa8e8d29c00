/**
 * The trajectory of the always-valid p and confidence sequence over the answers in arrival order (stats/sequential.ts
 * anytimeValid at up to TRAJECTORY_POINTS evenly spaced prefixes; running moments by Welford's update). O(n) after
 * an O(n log n) read.
 */
import { anytimeValid, DEFAULT_TARGET_PER_CONDITION } from '../../../stats/sequential.js';
import type { ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';

/** Most points of a trajectory. */
export const TRAJECTORY_POINTS = 60;

// ---------------------------------------------------------------------------------------------------------
// Trajectory of the always-valid p
// ---------------------------------------------------------------------------------------------------------

export interface TrajectoryPointView {
  /** Answers so far (both conditions). */
  n: number;
  nA: number;
  nB: number;
  p: number | null;
  lower: number | null;
  upper: number | null;
  estimate: number | null;
}

/**
 * The always-valid p and confidence sequence at up to `maxPoints` evenly spaced prefixes of the answers in
 * arrival order (running moments by Welford's update; O(n)).
 */
export async function trajectory(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  conditionKeys: [number, number],
  maxPoints = TRAJECTORY_POINTS,
): Promise<{ dataVersion: number; targetPerCondition: number; mixing: number; method: string; points: TrajectoryPointView[] }> {
  const arrival = await store.looks.getArrivalValues(measure.key, conditionKeys);
  const total = arrival.values.length;
  const k = Math.min(maxPoints, total);
  const checkpoints: number[] = [];
  for (let i = 1; i <= k; i++) {
    const c = Math.round((i * total) / k);
    if (checkpoints.length === 0 || c > checkpoints[checkpoints.length - 1]) checkpoints.push(c);
  }
  const n = [0, 0];
  const mean = [0, 0];
  const m2 = [0, 0];
  const points: TrajectoryPointView[] = [];
  const opts = { alpha: experiment.alpha, plannedPerCondition: experiment.plannedPerCondition };
  let next = 0;
  for (let i = 0; i < total && next < checkpoints.length; i++) {
    const g = arrival.group[i];
    const x = arrival.values[i];
    n[g] += 1;
    const delta = x - mean[g];
    mean[g] += delta / n[g];
    m2[g] += delta * (x - mean[g]);
    if (i + 1 === checkpoints[next]) {
      next++;
      const r = anytimeValid(
        {
          na: n[0],
          meanA: mean[0],
          varA: n[0] > 1 ? m2[0] / (n[0] - 1) : 0,
          nb: n[1],
          meanB: mean[1],
          varB: n[1] > 1 ? m2[1] / (n[1] - 1) : 0,
        },
        opts,
      );
      points.push({
        n: i + 1,
        nA: n[0],
        nB: n[1],
        p: r.p,
        lower: r.ci.lower,
        upper: r.ci.upper,
        estimate: n[0] > 0 && n[1] > 0 ? mean[0] - mean[1] : null,
      });
    }
  }
  const target = experiment.plannedPerCondition ?? DEFAULT_TARGET_PER_CONDITION;
  const ref = anytimeValid({ na: 0, meanA: 0, varA: 0, nb: 0, meanB: 0, varB: 0 }, opts);
  return { dataVersion: arrival.dataVersion, targetPerCondition: target, mixing: ref.mixing, method: ref.method, points };
}

