/**
 * The points of a trajectory: the anytime-valid p and interval (confidence sequence) for mean a − mean b after each
 * of up to `maxPoints` evenly spaced prefixes of the answers in arrival order. Pure (stats/ only), so a worker
 * thread can run it next to the read (comparisons/worker-pool.ts) and the main thread can run it as a fallback.
 *
 * Method: running moments of each condition by Welford's update (Welford 1962, Technometrics 4:419–420,
 * doi:10.1080/00401706.1962.10490022); at each checkpoint stats/sequential.ts anytimeValid on those moments
 * (see its header for the normal-mixture confidence sequence and its references).
 *
 * The floor: while a condition has fewer than `floorPerCondition` answers (30, the same floor as the running
 * values of the monitoring block) the plug-in variance behind the asymptotic sequence is unstable, so such a point
 * is `provisional`: its p and bounds are still reported, but it never enters the running values and a chart draws
 * no interval, p or crossing for it. From the floor on, the running values are the intersection of the intervals
 * and the minimum of p over the points so far (an intersection of a confidence sequence over any set of times is
 * still a confidence sequence, so the running interval is valid and never widens). Should the intersection become
 * empty (a chance of at most α under a constant difference), the running bounds are null from there on.
 *
 * Cost: O(n) time and O(maxPoints) memory beyond the arrival arrays; anytimeValid is O(1) per checkpoint.
 */
import { anytimeValid } from '../../../stats/sequential.js';

/**
 * Answers per condition before a point counts as evidence: the floor of the running values, here and in the
 * monitoring block of a comparison (interim.ts MIN_RUNNING_PER_CONDITION).
 */
export const FLOOR_PER_CONDITION = 30;

export interface ArrivalArrays {
  /** 0 for condition a, 1 for condition b (parallel to values). */
  group: Uint8Array;
  values: Float64Array;
}

export interface TrajectoryPointView {
  /** Answers so far (both conditions). */
  n: number;
  nA: number;
  nB: number;
  /** True while a condition has fewer answers than the floor: not part of the running values, not drawn as evidence. */
  provisional: boolean;
  p: number | null;
  lower: number | null;
  upper: number | null;
  estimate: number | null;
  /** Minimum of p over the points from the floor to here; null before the floor. */
  runningP: number | null;
  /** Intersection of the intervals from the floor to here; null before the floor (or when empty). */
  runningLower: number | null;
  runningUpper: number | null;
}

export interface TrajectoryOptions {
  alpha: number;
  plannedPerCondition: number | null;
  maxPoints: number;
  floorPerCondition: number;
}

/** Checkpoints: up to maxPoints evenly spaced prefix lengths of `total`, increasing, the last equal to total. */
export function checkpointsOf(total: number, maxPoints: number): number[] {
  const k = Math.min(maxPoints, total);
  const out: number[] = [];
  for (let i = 1; i <= k; i++) {
    const c = Math.round((i * total) / k);
    if (out.length === 0 || c > out[out.length - 1]) out.push(c);
  }
  return out;
}

/** The trajectory points of answers in arrival order (see the header). O(n). */
export function trajectoryPoints(arrival: ArrivalArrays, options: TrajectoryOptions): TrajectoryPointView[] {
  const total = arrival.values.length;
  const checkpoints = checkpointsOf(total, options.maxPoints);
  const n = [0, 0];
  const mean = [0, 0];
  const m2 = [0, 0];
  const points: TrajectoryPointView[] = [];
  const opts = { alpha: options.alpha, plannedPerCondition: options.plannedPerCondition };
  let runP: number | null = null;
  let runLower: number | null = null;
  let runUpper: number | null = null;
  let emptied = false;
  let next = 0;
  for (let i = 0; i < total && next < checkpoints.length; i++) {
    const g = arrival.group[i];
    const x = arrival.values[i];
    n[g] += 1;
    const delta = x - mean[g];
    mean[g] += delta / n[g];
    m2[g] += delta * (x - mean[g]);
    if (i + 1 !== checkpoints[next]) continue;
    next++;
    const r = anytimeValid(
      { na: n[0], meanA: mean[0], varA: n[0] > 1 ? m2[0] / (n[0] - 1) : 0, nb: n[1], meanB: mean[1], varB: n[1] > 1 ? m2[1] / (n[1] - 1) : 0 },
      opts,
    );
    const provisional = Math.min(n[0], n[1]) < options.floorPerCondition;
    if (!provisional) {
      if (r.p !== null) runP = runP === null ? r.p : Math.min(runP, r.p);
      if (r.ci.lower !== null && r.ci.upper !== null && !emptied) {
        runLower = runLower === null ? r.ci.lower : Math.max(runLower, r.ci.lower);
        runUpper = runUpper === null ? r.ci.upper : Math.min(runUpper, r.ci.upper);
        if (runLower > runUpper) {
          emptied = true;
          runLower = null;
          runUpper = null;
        }
      }
    }
    points.push({
      n: i + 1,
      nA: n[0],
      nB: n[1],
      provisional,
      p: r.p,
      lower: r.ci.lower,
      upper: r.ci.upper,
      estimate: n[0] > 0 && n[1] > 0 ? mean[0] - mean[1] : null,
      runningP: runP,
      runningLower: runLower,
      runningUpper: runUpper,
    });
  }
  return points;
}
