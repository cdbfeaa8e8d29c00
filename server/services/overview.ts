/**
 * The team overview: every study a key may see, with status, progress toward the planned size per condition, answers
 * today and this week, refused values, the number of warning flags, and the primary outcome's headline (both routes'
 * estimate with interval and p; the anytime-valid reading while the study is open).
 *
 * Cost. The ETag is built from what the numbers depend on — per study its key, definition time, dataVersion,
 * rejected total and look count (one cheap stamp query each), plus the UTC day and ISO week (for "today" and "this
 * week") — so a poll with If-None-Match costs one list and one stamp per study and answers 304. A changed stamp
 * recomputes through the comparison service's cache (the family of first-pair comparisons, computed only for studies
 * whose data moved) and one count of the study's responses received since the two boundaries.
 */
import { createHash } from 'node:crypto';
import type { ComparisonStamp, ExperimentRecord, Store } from '../store/types.js';
import type { OverviewBody, OverviewStudy } from '../schemas/overview.js';
import { CACHE_FORMAT, DEFAULT_COMPARISON_OPTIONS, type ComparisonService } from './comparisons/service.js';
import { primaryChangesOf, primaryOf } from './measure-roles.js';

/** 00:00 UTC of `now`'s day and of the Monday of its ISO week. */
export function boundaries(now: Date): { day: string; week: string } {
  const day = new Date(Date.UTC(now.getUTCFullYear(), now.getUTCMonth(), now.getUTCDate()));
  const sinceMonday = (day.getUTCDay() + 6) % 7;
  const week = new Date(day.getTime() - sinceMonday * 86_400_000);
  return { day: day.toISOString(), week: week.toISOString() };
}

export interface OverviewInput {
  experiments: ExperimentRecord[];
  stamps: ComparisonStamp[];
  now: Date;
}

export async function overviewInput(store: Store, onlyKey: number | null, now: Date): Promise<OverviewInput> {
  const experiments = await store.experiments.list(onlyKey);
  const stamps: ComparisonStamp[] = [];
  for (const e of experiments) stamps.push((await store.responses.getComparisonStamp(e.key)) ?? { dataVersion: e.dataVersion, rejectedTotal: 0, looks: 0 });
  return { experiments, stamps, now };
}

export function overviewEtag(input: OverviewInput): string {
  const b = boundaries(input.now);
  const parts = ['overview', CACHE_FORMAT, b.day, b.week, ...input.experiments.map((e, i) => [e.key, e.updatedAt, e.status, input.stamps[i].dataVersion, input.stamps[i].rejectedTotal, input.stamps[i].looks].join('|'))];
  return `"${createHash('sha256').update(parts.join('\n')).digest('base64url').slice(0, 32)}"`;
}

export async function buildOverview(store: Store, comparisons: ComparisonService, input: OverviewInput): Promise<OverviewBody> {
  const b = boundaries(input.now);
  const studies: OverviewStudy[] = [];
  for (let i = 0; i < input.experiments.length; i++) {
    const e = input.experiments[i];
    const stamp = input.stamps[i];
    const counts = store.responses.countReceivedSince ? await store.responses.countReceivedSince(e.key, [b.day, b.week]) : null;
    const family = e.conditions.length >= 2 && e.measures.length > 0 ? (await comparisons.family(e, { ...DEFAULT_COMPARISON_OPTIONS, pairs: 'first', adjust: 'holm' }, stamp)).body : null;
    const warnings = family ? family.comparisons.reduce((s, c) => s + c.flags.filter((f) => f.severity === 'warning').length, 0) : 0;
    const primaryId = primaryOf(e);
    const entry = family?.comparisons.find((c) => c.measure === primaryId) ?? null;
    const measure = e.measures.find((m) => m.id === primaryId);
    const av = entry?.monitoring?.anytimeValid ?? null;
    studies.push({
      id: e.id,
      title: e.title,
      status: e.status,
      dataVersion: stamp.dataVersion,
      plannedPerCondition: e.plannedPerCondition,
      conditions: e.conditions.map((c) => {
        const answers = c.responses - c.excluded;
        return {
          id: c.id,
          label: c.label,
          answers,
          excluded: c.excluded,
          planned: e.plannedPerCondition,
          progress: e.plannedPerCondition ? answers / e.plannedPerCondition : null,
        };
      }),
      answersToday: counts ? counts[0] : null,
      answersThisWeek: counts ? counts[1] : null,
      refusedValues: stamp.rejectedTotal,
      warnings,
      primary:
        entry && measure
          ? {
              measure: measure.id,
              label: measure.label,
              a: entry.a,
              b: entry.b,
              welch: { estimate: entry.welch.meanDifference, lower: entry.welch.ci.lower, upper: entry.welch.ci.upper, p: entry.welch.p },
              rankSum: { estimate: entry.hodgesLehmann.estimate, lower: entry.hodgesLehmann.ci.lower, upper: entry.hodgesLehmann.ci.upper, p: entry.mannWhitney.p },
              anytimeValid: e.status === 'open' && av ? { p: av.p, lower: av.ci.lower, upper: av.ci.upper } : null,
              changedAfterDataCollectionBegan: primaryChangesOf(e).length > 0,
            }
          : null,
    });
  }
  return { generatedAt: input.now.toISOString(), studies };
}
