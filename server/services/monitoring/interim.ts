/**
 * Interim monitoring of a comparison: the `monitoring` block of every comparison (the anytime-valid block and the
 * group-sequential looks recorded so far). Recording looks is looks.ts, the trajectory trajectory.ts.
 *
 * The statistics are in stats/sequential.ts (see its header for formulas and references); this file reads the
 * store, calls stats, and shapes the result:
 *
 *  - anytimeValid: the anytime-valid p and interval (confidence sequence) for mean a − mean b (Robbins' 1970
 *    normal mixture; Howard et al. 2021; asymptotic version of Waudby-Smith et al.), tuned to the planned size per
 *    condition (or 500). It may be read after every answer. Besides the current value, the running minimum of p
 *    and the running intersection of the intervals over the recorded history are reported (`running`): they
 *    are just as valid and never move back. History: one row per (experiment, measure, pair, α, target,
 *    dataVersion), written when a comparison is computed at a new dataVersion (INSERT OR IGNORE, O(1)); points
 *    with fewer than MIN_RUNNING_PER_CONDITION answers in a condition are left out of the running values,
 *    because the plug-in variance behind the asymptotic sequence is unstable that early.
 *  - groupSequential: looks recorded with POST …/looks (Lan–DeMets boundaries, computed when the look is
 *    recorded from the earlier looks' fractions, stored, never recomputed).
 *
 * Information fraction of a look: effective answers per condition / planned per condition, capped at 1, where
 * the effective number is the harmonic mean 2·n_a·n_b/(n_a + n_b) (the information about a − b is proportional
 * to 1/(1/n_a + 1/n_b)); for equal groups it is simply n per condition / planned.
 *
 * Cost: computeMonitoring O(1) statistics + two small indexed reads and one insert; recording a look O(K · m²)
 * for the K looks' boundaries (≈ 0.1 s for 20 looks); the trajectory O(n) after an O(n log n) read.
 */
import { anytimeValid } from '../../../stats/sequential.js';
import type { SpendingName } from '../../store/monitoring-types.js';
import { FLOOR_PER_CONDITION } from './trajectory-points.js';
import { gsMethod, informationFraction, lookView, monitoringOption, type LookView } from './looks.js';
import type { ExperimentRecord, Store } from '../../store/types.js';

export interface MonitoringInput {
  store: Store;
  experiment: ExperimentRecord;
  measureKey: number;
  conditionKeys: [number, number];
  /** Moments of the two groups as compared (after exclusions). */
  a: { n: number; mean: number | null; variance: number | null };
  b: { n: number; mean: number | null; variance: number | null };
  /** Welch t and df of the comparison, for group-sequential looks. */
  welch: { t: number | null; df: number | null };
  alpha: number;
  /** dataVersion of the snapshot the moments come from (default: experiment.dataVersion). Keys the history. */
  dataVersion?: number;
  /** True when excluded responses are part of this comparison: nothing is recorded in the history then. */
  includeExcluded?: boolean;
  /** Record this point in the anytime history (default true). */
  recordHistory?: boolean;
}

/** Answers per condition below which a point is left out of the running minimum / intersection (trajectory-points.ts). */
export const MIN_RUNNING_PER_CONDITION = FLOOR_PER_CONDITION;

export interface IntervalView {
  level: number;
  lower: number | null;
  upper: number | null;
  reason?: string;
}

export interface AnytimeValidBlock {
  method: string;
  /** Anytime-valid p now (two-sided, H0: mean a = mean b). */
  p: number | null;
  /** Confidence sequence for mean a − mean b now. */
  ci: IntervalView;
  /** Mean a − mean b now. */
  estimate: number | null;
  /** Mixing parameter ρ of the normal mixture (standardised scale). */
  mixing: number;
  /** Answers per condition at which the sequence is tightest (the planned size, or 500). */
  targetPerCondition: number;
  /** Running minimum of p and intersection of the intervals over the recorded history (valid; never moves back). */
  running: {
    p: number | null;
    ci: IntervalView;
    /** Recorded points the running values are taken over. */
    points: number;
    minPerCondition: number;
    reason?: string;
  };
  reason?: string;
}

export interface GroupSequentialBlock {
  method: string;
  spending: SpendingName | null;
  alpha: number;
  plannedPerCondition: number | null;
  /** Information fraction the next look would be recorded at (null without a planned size). */
  currentFraction: number | null;
  looks: LookView[];
  /** Number of the first look whose boundary was crossed (where the plan says stop), or null. */
  firstCrossing: number | null;
  reason?: string;
}

export interface Monitoring {
  anytimeValid: AnytimeValidBlock | null;
  groupSequential: GroupSequentialBlock | null;
  caveat: string;
}

/**
 * Combine the stored running aggregate with this comparison's point, not yet written (see computeMonitoring).
 * A point with fewer than MIN_RUNNING_PER_CONDITION answers in a condition is ignored, as the stored query does;
 * a point whose dataVersion is already stored is not counted twice.
 */
function withPendingPoint(
  stored: { p: number; lower: number; upper: number; points: number; lastDataVersion: number } | null,
  point: { dataVersion: number; nA: number; nB: number; p: number; lower: number; upper: number } | null,
): { p: number; lower: number; upper: number; points: number } | null {
  if (!point || point.nA < MIN_RUNNING_PER_CONDITION || point.nB < MIN_RUNNING_PER_CONDITION) return stored;
  if (stored === null) return { p: point.p, lower: point.lower, upper: point.upper, points: 1 };
  if (stored.lastDataVersion >= point.dataVersion) return stored;
  return {
    p: Math.min(stored.p, point.p),
    lower: Math.max(stored.lower, point.lower),
    upper: Math.min(stored.upper, point.upper),
    points: stored.points + 1,
  };
}

export const CAVEAT =
  'While the study runs, read the running anytime-valid p-value and the anytime-valid interval (confidence sequence): ' +
  'they may be checked after every answer without inflating false positives, and they never move back. The ordinary ' +
  'Welch and rank-sum p-values are valid only once, at the planned size. The anytime-valid p and interval are for the ' +
  'difference in means (the Welch setting), from the asymptotic normal-mixture confidence sequence, for every item. ' +
  'Group-sequential looks are valid only if the study stops at the first crossed boundary and looks no more often ' +
  'than it records.';

const EARLY_CAVEAT = ` Fewer than ${MIN_RUNNING_PER_CONDITION} answers in a condition: the variance estimate is still unstable, so treat the current anytime-valid p as provisional (the running values ignore such points).`;

/** The monitoring block of a comparison of one measure between two conditions. */
export async function computeMonitoring(input: MonitoringInput): Promise<Monitoring | null> {
  const { store, experiment, measureKey, conditionKeys, alpha } = input;
  const planned = experiment.plannedPerCondition;
  const av = anytimeValid(
    {
      na: input.a.n,
      meanA: input.a.mean ?? 0,
      varA: input.a.variance ?? 0,
      nb: input.b.n,
      meanB: input.b.mean ?? 0,
      varB: input.b.variance ?? 0,
    },
    { alpha, plannedPerCondition: planned },
  );
  const historyKey = { experimentKey: experiment.key, measureKey, conditionKeys, alpha, targetPerCondition: av.targetPerCondition };
  const dataVersion = input.dataVersion ?? experiment.dataVersion;
  // The history point of this dataVersion is written after the reply (its commit waits for an fsync, which the
  // person polling should not wait for): the running values below combine the stored points with this one in
  // memory. A point lost in a crash before it is written only makes later running values more conservative.
  const point =
    input.recordHistory !== false && input.includeExcluded !== true && av.p !== null && av.ci.lower !== null && av.ci.upper !== null
      ? { dataVersion, nA: input.a.n, nB: input.b.n, p: av.p, lower: av.ci.lower, upper: av.ci.upper }
      : null;
  if (point) {
    const recordedAt = new Date().toISOString();
    setImmediate(() => {
      store.looks.recordAnytime(historyKey, point, recordedAt).catch(() => {
        /* the database was busy: this point is simply not in the history (conservative) */
      });
    });
  }
  const level = 1 - alpha;
  let running: AnytimeValidBlock['running'];
  if (input.includeExcluded === true) {
    running = {
      p: null,
      ci: { level, lower: null, upper: null, reason: 'No running values for a comparison that includes excluded responses.' },
      points: 0,
      minPerCondition: MIN_RUNNING_PER_CONDITION,
      reason: 'The history is kept for the analysis without excluded responses only.',
    };
  } else {
    const stored = await store.looks.runningAnytime(historyKey, MIN_RUNNING_PER_CONDITION);
    const r = withPendingPoint(stored, point);
    if (r === null) {
      const reason = `No recorded point has at least ${MIN_RUNNING_PER_CONDITION} answers in each condition yet.`;
      running = { p: null, ci: { level, lower: null, upper: null, reason }, points: 0, minPerCondition: MIN_RUNNING_PER_CONDITION, reason };
    } else if (r.lower > r.upper) {
      running = {
        p: r.p,
        ci: {
          level,
          lower: null,
          upper: null,
          reason:
            'The recorded intervals do not overlap: no constant difference is compatible with all of them (this happens with probability at most α when the difference is constant).',
        },
        points: r.points,
        minPerCondition: MIN_RUNNING_PER_CONDITION,
      };
    } else {
      running = { p: r.p, ci: { level, lower: r.lower, upper: r.upper }, points: r.points, minPerCondition: MIN_RUNNING_PER_CONDITION };
    }
  }
  const anytime: AnytimeValidBlock = {
    method: av.method,
    p: av.p,
    ci: { ...av.ci },
    estimate: av.estimate,
    mixing: av.mixing,
    targetPerCondition: av.targetPerCondition,
    running,
    ...(av.reason ? { reason: av.reason } : {}),
  };

  const option = monitoringOption(experiment);
  const looks = await store.looks.list(experiment.key, measureKey, conditionKeys);
  let groupSequential: GroupSequentialBlock | null = null;
  if (option || looks.length > 0) {
    const views = looks.map(lookView);
    const first = views.find((l) => l.crossed) ?? null;
    const spending = looks.length > 0 ? looks[0].spending : (option?.spending ?? null);
    groupSequential = {
      method: gsMethod(spending),
      spending,
      alpha: looks.length > 0 ? looks[0].alpha : experiment.alpha,
      plannedPerCondition: looks.length > 0 ? looks[0].plannedPerCondition : planned,
      currentFraction: planned === null ? null : informationFraction(input.a.n, input.b.n, planned),
      looks: views,
      firstCrossing: first ? first.number : null,
    };
    if (!option) groupSequential.reason = 'The experiment no longer declares monitoring; the looks recorded earlier are shown as they were.';
    else if (planned === null) groupSequential.reason = 'The experiment has no plannedPerCondition, so no information fraction and no look can be recorded.';
  }
  const early = input.a.n < MIN_RUNNING_PER_CONDITION || input.b.n < MIN_RUNNING_PER_CONDITION;
  return { anytimeValid: anytime, groupSequential, caveat: CAVEAT + (early ? EARLY_CAVEAT : '') };
}

