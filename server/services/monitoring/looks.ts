/**
 * Group-sequential looks: the information fraction, how a recorded look is shown (LookView, with the nominal p of
 * its boundary computed here only), recording a look (Welch t → z, Lan–DeMets boundary from the earlier looks'
 * fractions, stored in one transaction) and the one-sentence message about it. The current moments of a measure
 * (n, mean, variance per condition, excluded responses left out) are read by the one read rule of samples.ts.
 *
 * Information fraction of a look: effective answers per condition / planned per condition, capped at 1, where
 * the effective number is the harmonic mean 2·n_a·n_b/(n_a + n_b) (the information about a − b is proportional
 * to 1/(1/n_a + 1/n_b)); for equal groups it is simply n per condition / planned.
 *
 * Cost: recording a look O(K · m²) for the K looks' boundaries (≈ 0.1 s for 20 looks); reading moments as the
 * read rule (O(distinct values) for counts, O(n) for sorted values).
 */
import { moments, type Moments } from '../../../stats/descriptives.js';
import { normalUpperTail } from '../../../stats/distributions.js';
import { spendingBoundaries, welchToZ } from '../../../stats/sequential.js';
import { welchFromMoments } from '../../../stats/welch.js';
import type { LookRecord, SpendingName } from '../../store/monitoring-types.js';
import type { ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';
import { readSnapshot, samplesOf } from '../samples.js';

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

export function gsMethod(spending: SpendingName | null): string {
  return spending
    ? `Lan–DeMets alpha spending (${SPENDING_LABEL[spending]} type), symmetric two-sided boundaries by recursive numerical integration; observed z = normal score of the Welch t`
    : 'Lan–DeMets alpha spending';
}

/** How a recorded look is shown (in the monitoring block, the look routes and the look message). */
export function lookView(l: LookRecord): LookView {
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

// ---------------------------------------------------------------------------------------------------------
// Current moments from the store
// ---------------------------------------------------------------------------------------------------------

/** n, mean, variance of one measure in two conditions (excluded responses left out), from one snapshot. */
export async function currentMoments(
  store: Store,
  measure: MeasureRecord,
  conditionKeys: [number, number],
): Promise<{ dataVersion: number; a: Moments; b: Moments }> {
  const snap = await readSnapshot(store, measure, conditionKeys, false);
  const { a, b } = samplesOf(measure, snap);
  return { dataVersion: snap.dataVersion, a: moments(a), b: moments(b) };
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

