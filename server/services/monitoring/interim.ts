/**
 * Interim monitoring of a comparison (the `monitoring` block of every comparison), recording of group-sequential
 * looks, the trajectory of the always-valid p, and the permuted-block plan for balanced assignment.
 *
 * The statistics are in stats/sequential.ts (see its header for formulas and references); this file reads the
 * store, calls stats, and shapes the result:
 *
 *  - anytimeValid: the always-valid p and confidence sequence for mean a − mean b (asymptotic confidence
 *    sequence of Waudby-Smith et al. 2021 = normal-mixture mSPRT of Johari et al.), tuned to the planned size per
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
import { randomInt } from 'node:crypto';
import { moments, type Moments } from '../../../stats/descriptives.js';
import { normalUpperTail } from '../../../stats/distributions.js';
import { fromCounts, fromSortedValues } from '../../../stats/sample.js';
import { anytimeValid, DEFAULT_TARGET_PER_CONDITION, spendingBoundaries, welchToZ } from '../../../stats/sequential.js';
import { welchFromMoments } from '../../../stats/welch.js';
import type { LookRecord, SpendingName } from '../../store/monitoring-types.js';
import { MAX_DENSE_COUNTS } from '../../store/sqlite/responses.js';
import type { ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';

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

/** Answers per condition below which a point is left out of the running minimum / intersection. */
export const MIN_RUNNING_PER_CONDITION = 30;
/** Most points of a trajectory. */
export const TRAJECTORY_POINTS = 60;

export interface IntervalView {
  level: number;
  lower: number | null;
  upper: number | null;
  reason?: string;
}

export interface AnytimeValidBlock {
  method: string;
  /** Always-valid p now (two-sided, H0: mean a = mean b). */
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

export interface LookView {
  number: number;
  recordedAt: string;
  dataVersion: number;
  fraction: number;
  nA: number;
  nB: number;
  cumulativeAlpha: number;
  alphaSpent: number;
  boundaryZ: number | null;
  nominalP: number | null;
  observedZ: number;
  crossed: boolean;
  /** "a" when crossed with mean a larger, "b" when crossed with mean b larger, null when not crossed. */
  direction: 'a' | 'b' | null;
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

/** Effective answers per condition over the planned size, capped at 1 (0 when a group is empty). */
export function informationFraction(nA: number, nB: number, planned: number): number {
  if (nA <= 0 || nB <= 0) return 0;
  const effective = (2 * nA * nB) / (nA + nB);
  return Math.min(1, effective / planned);
}

export function monitoringOption(e: ExperimentRecord): { spending: SpendingName } | null {
  const m = e.options.monitoring as { spending?: unknown } | null | undefined;
  if (m && (m.spending === 'obrien-fleming' || m.spending === 'pocock')) return { spending: m.spending };
  return null;
}

const SPENDING_LABEL: Record<SpendingName, string> = { 'obrien-fleming': "O'Brien–Fleming", pocock: 'Pocock' };

function gsMethod(spending: SpendingName | null): string {
  return spending
    ? `Lan–DeMets alpha spending (${SPENDING_LABEL[spending]} type), symmetric two-sided boundaries by recursive numerical integration; observed z = normal score of the Welch t`
    : 'Lan–DeMets alpha spending';
}

function lookView(l: LookRecord): LookView {
  const crossed = l.boundaryZ !== null && Math.abs(l.observedZ) >= l.boundaryZ;
  return {
    number: l.number,
    recordedAt: l.recordedAt,
    dataVersion: l.dataVersion,
    fraction: l.fraction,
    nA: l.nA,
    nB: l.nB,
    cumulativeAlpha: l.cumulativeAlpha,
    alphaSpent: l.alphaSpent,
    boundaryZ: l.boundaryZ,
    nominalP: l.boundaryZ === null ? null : 2 * normalUpperTail(l.boundaryZ),
    observedZ: l.observedZ,
    crossed,
    direction: crossed ? (l.observedZ > 0 ? 'a' : 'b') : null,
  };
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
  'While the study runs, read the running always-valid p-value and its confidence sequence: they may be checked ' +
  'after every answer without inflating false positives, and they never move back. The ordinary Welch and rank-sum ' +
  'p-values are valid only once, at the planned size. The always-valid p and confidence sequence are for the difference in ' +
  'means (the Welch setting) and use the asymptotic normal-mixture sequence for every item, continuous or bounded ' +
  'integer; the betting confidence sequence for bounded items (Waudby-Smith & Ramdas 2024) is not implemented. ' +
  'Group-sequential looks are valid only if the study stops at the first crossed boundary and looks no more often ' +
  'than it records.';

const EARLY_CAVEAT = ` Fewer than ${MIN_RUNNING_PER_CONDITION} answers in a condition: the variance estimate is still unstable, so treat the current always-valid p as provisional (the running values ignore such points).`;

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

// ---------------------------------------------------------------------------------------------------------
// Current moments from the store
// ---------------------------------------------------------------------------------------------------------

/** n, mean, variance of one measure in two conditions (excluded responses left out), from one snapshot. */
export async function currentMoments(
  store: Store,
  measure: MeasureRecord,
  conditionKeys: [number, number],
): Promise<{ dataVersion: number; a: Moments; b: Moments }> {
  if (measure.integer && measure.max - measure.min + 1 <= MAX_DENSE_COUNTS) {
    const snap = await store.responses.getCountsSnapshot(measure.key, conditionKeys, false);
    return {
      dataVersion: snap.dataVersion,
      a: moments(fromCounts(snap.groups[0], measure.min)),
      b: moments(fromCounts(snap.groups[1], measure.min)),
    };
  }
  const snap = await store.responses.getSortedValuesSnapshot(measure.key, conditionKeys, false);
  return { dataVersion: snap.dataVersion, a: moments(fromSortedValues(snap.groups[0])), b: moments(fromSortedValues(snap.groups[1])) };
}

// ---------------------------------------------------------------------------------------------------------
// Recording a look
// ---------------------------------------------------------------------------------------------------------

export type RecordLookResult =
  | { kind: 'recorded'; look: LookRecord; view: LookView; previous: LookView[] }
  | { kind: 'not-configured'; detail: string }
  | { kind: 'not-possible'; detail: string };

/**
 * Record an interim look at the current information fraction: Welch t → z (welchToZ), the boundary from
 * spendingBoundaries given the earlier looks' fractions (the final look, fraction 1, spends all remaining α),
 * stored in one transaction that checks no other look of the sequence was stored meanwhile.
 */
export async function recordLook(
  store: Store,
  experiment: ExperimentRecord,
  measure: MeasureRecord,
  conditionKeys: [number, number],
  apiKeyId: number | null,
  now: string = new Date().toISOString(),
): Promise<RecordLookResult> {
  const option = monitoringOption(experiment);
  if (!option) {
    return {
      kind: 'not-configured',
      detail: `Experiment ${experiment.id} declares no group-sequential monitoring; set monitoring: { "spending": "obrien-fleming" } (or "pocock") in its definition to record looks.`,
    };
  }
  const planned = experiment.plannedPerCondition;
  if (planned === null) {
    return {
      kind: 'not-configured',
      detail: `Experiment ${experiment.id} has no plannedPerCondition; a look is placed at answers so far / planned answers, so set the planned size first.`,
    };
  }
  const earlier = await store.looks.list(experiment.key, measure.key, conditionKeys);
  if (earlier.length > 0) {
    const f = earlier[0];
    const changed: string[] = [];
    if (f.spending !== option.spending) changed.push(`spending (${f.spending} → ${option.spending})`);
    if (f.alpha !== experiment.alpha) changed.push(`alpha (${f.alpha} → ${experiment.alpha})`);
    if (f.plannedPerCondition !== planned) changed.push(`plannedPerCondition (${f.plannedPerCondition} → ${planned})`);
    if (changed.length > 0) {
      return {
        kind: 'not-possible',
        detail: `The earlier looks of ${measure.id} were recorded with other settings: ${changed.join(', ')}. Boundaries cannot be continued under changed settings; restore them to record further looks.`,
      };
    }
  }
  const snap = await currentMoments(store, measure, conditionKeys);
  const welch = welchFromMoments(snap.a, snap.b, { alternative: 'two-sided', confidenceLevel: 1 - experiment.alpha });
  if (welch.t === null || welch.df === null) {
    return { kind: 'not-possible', detail: `No look recorded: the Welch test of ${measure.id} is not defined yet. ${welch.reason ?? ''}`.trim() };
  }
  const fraction = informationFraction(snap.a.n, snap.b.n, planned);
  const last = earlier.length > 0 ? earlier[earlier.length - 1] : null;
  if (last && !(fraction > last.fraction)) {
    return {
      kind: 'not-possible',
      detail:
        last.fraction >= 1
          ? `The final look (number ${last.number}, at the planned size) was already recorded for ${measure.id}; all alpha is spent.`
          : `No new information since look ${last.number} (fraction ${round(last.fraction)}): a look must come after more answers.`,
    };
  }
  const fractions = [...earlier.map((l) => l.fraction), fraction];
  const bounds = spendingBoundaries(fractions, { alpha: experiment.alpha, spending: option.spending });
  const b = bounds[bounds.length - 1];
  const observedZ = welchToZ(welch.t, welch.df);
  const outcome = await store.looks.record(
    experiment.key,
    {
      conditionKeys,
      measureKey: measure.key,
      recordedAt: now,
      dataVersion: snap.dataVersion,
      fraction,
      nA: snap.a.n,
      nB: snap.b.n,
      plannedPerCondition: planned,
      spending: option.spending,
      alpha: experiment.alpha,
      cumulativeAlpha: b.cumulativeAlpha,
      alphaSpent: b.alphaSpent,
      boundaryZ: b.boundaryZ,
      welchT: welch.t,
      welchDf: welch.df,
      observedZ,
    },
    earlier.length,
    apiKeyId,
  );
  if (outcome.kind === 'raced') {
    return { kind: 'not-possible', detail: `Another look of ${measure.id} was recorded at the same moment (now ${outcome.looks}); read the looks and try again.` };
  }
  return { kind: 'recorded', look: outcome.look, view: lookView(outcome.look), previous: earlier.map(lookView) };
}

function round(x: number): string {
  return String(Number(x.toPrecision(4)));
}

/** One sentence a researcher can act on. */
export function lookMessage(view: LookView, previous: LookView[], spending: SpendingName): string {
  const pct = `${Number((view.fraction * 100).toPrecision(3))} %`;
  const head = `Look ${view.number} (${SPENDING_LABEL[spending]} plan) at ${pct} of the planned answers: observed z = ${round(view.observedZ)}`;
  const stoppedBefore = previous.find((l) => l.crossed);
  const tail = stoppedBefore ? ` Note: the plan already said stop at look ${stoppedBefore.number}.` : '';
  if (view.boundaryZ === null) return `${head}; this look spends no alpha and cannot stop the study.${tail}`;
  if (view.crossed) {
    return `${head}, |z| ≥ boundary ${round(view.boundaryZ)}: the boundary is crossed — stop; the difference favours ${view.direction === 'a' ? 'a' : 'b'}.${tail}`;
  }
  return view.fraction >= 1
    ? `${head}, |z| < boundary ${round(view.boundaryZ)}: final look, no significant difference at α.${tail}`
    : `${head}, |z| < boundary ${round(view.boundaryZ)}: continue.${tail}`;
}

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

// ---------------------------------------------------------------------------------------------------------
// Balanced assignment: the permuted-block plan
// ---------------------------------------------------------------------------------------------------------

/** Largest block (slots) an allocation may give. */
export const MAX_BLOCK = 1000;
/** Smallest block: the reduced weights are repeated until a block has at least this many slots. */
export const MIN_BLOCK = 4;

function gcd(a: number, b: number): number {
  while (b) [a, b] = [b, a % b];
  return a;
}

export type BlockPlan =
  | {
      ok: true;
      /** Integer weights per condition, in definition order (reduced by their gcd). */
      weights: number[];
      /** Copies of the reduced weights per block. */
      multiplier: number;
      blockSize: number;
      /** Condition keys with repeats (sorted by definition order): what every block contains. */
      template: number[];
    }
  | { ok: false; reason: string };

/**
 * Permuted blocks for the planned allocation: weights from options.allocation (equal when absent), turned into
 * the smallest whole numbers with the same ratios (decimal weights with up to three decimals are exact), then
 * repeated until a block has at least MIN_BLOCK slots: [1, 1] → blocks of 4, [1, 2] → 6, [2, 3] → 5,
 * [1, 1, 1] → 6. O(conditions).
 */
export function blockPlan(experiment: ExperimentRecord): BlockPlan {
  const alloc = experiment.options.allocation as Record<string, number> | null | undefined;
  const raw = experiment.conditions.map((c) => (alloc && typeof alloc[c.id] === 'number' ? alloc[c.id] : alloc ? Number.NaN : 1));
  if (raw.some((w) => !(w > 0) || !Number.isFinite(w))) {
    return { ok: false, reason: 'The allocation needs a positive weight for every condition.' };
  }
  let ints: number[] | null = null;
  for (const scale of [1, 10, 100, 1000]) {
    const scaled = raw.map((w) => w * scale);
    if (scaled.every((x) => Math.abs(x - Math.round(x)) <= 1e-9 * Math.max(1, x))) {
      ints = scaled.map((x) => Math.round(x));
      break;
    }
  }
  if (!ints) return { ok: false, reason: 'The allocation weights must have at most three decimals (e.g. 1 and 2, or 0.25 and 0.75).' };
  const g = ints.reduce((acc, x) => gcd(acc, x));
  const weights = ints.map((x) => x / g);
  const sum = weights.reduce((s, x) => s + x, 0);
  const multiplier = Math.max(1, Math.ceil(MIN_BLOCK / sum));
  const blockSize = sum * multiplier;
  if (blockSize > MAX_BLOCK) {
    return {
      ok: false,
      reason: `The allocation weights give blocks of ${blockSize} respondents (more than ${MAX_BLOCK}); use small whole numbers such as 1 and 2.`,
    };
  }
  const template: number[] = [];
  experiment.conditions.forEach((c, i) => {
    for (let k = 0; k < weights[i] * multiplier; k++) template.push(c.key);
  });
  return { ok: true, weights, multiplier, blockSize, template };
}

/** Fisher–Yates shuffle with crypto.randomInt (a cryptographic source). Returns a new array. O(length). */
export function secureShuffle<T>(items: readonly T[]): T[] {
  const out = [...items];
  for (let i = out.length - 1; i > 0; i--) {
    const j = randomInt(i + 1);
    const tmp = out[i];
    out[i] = out[j];
    out[j] = tmp;
  }
  return out;
}
