/**
 * The answers behind a quality flag: for the outlier flag (the values it lists per condition) and the influential-answer
 * flag (the answer whose removal moves Welch's p across alpha), the stored responses with those values — response id,
 * value, arrival time, excluded or not — so a researcher can look at them and, with an admin key, exclude or restore one.
 *
 * Bounded: the outlier flag lists at most 10 values per condition, and at most ANSWERS_PER_GROUP answers are read per
 * flag and condition through the index (measure, condition, excluded, value); `truncated` says when more exist. The
 * list is computed with the comparison and cached with it (comparisons are answered to read and admin keys only).
 */
import type { Flag } from '../../../stats/flags.js';
import type { Store } from '../../store/types.js';
import type { ComparisonTarget } from '../targets.js';

export const ANSWERS_PER_GROUP = 25;

export interface FlaggedAnswer {
  flag: 'outliers' | 'influential_point';
  group: 'a' | 'b';
  condition: string;
  responseId: string;
  value: number;
  receivedAt: string;
  excluded: boolean;
}

export interface FlaggedAnswers {
  answers: FlaggedAnswer[];
  /** True when some flagged values have more answers than were listed. */
  truncated: boolean;
  limitPerGroup: number;
  reason?: string;
}

type Wanted = { flag: FlaggedAnswer['flag']; group: 'a' | 'b'; values: number[]; expected: number };

function wantedOf(t: ComparisonTarget, flags: readonly Flag[]): Wanted[] {
  const out: Wanted[] = [];
  const outliers = flags.find((f) => f.code === 'outliers');
  if (outliers) {
    for (const group of ['a', 'b'] as const) {
      const g = outliers.detail[group] as { values?: { value: number; count: number }[] } | undefined;
      if (!g || !Array.isArray(g.values) || g.values.length === 0) continue;
      out.push({ flag: 'outliers', group, values: g.values.map((v) => v.value), expected: g.values.reduce((s, v) => s + v.count, 0) });
    }
  }
  const influential = flags.find((f) => f.code === 'influential_point');
  if (influential) {
    const answers = (influential.detail.answers ?? []) as { condition: string; value: number }[];
    for (const group of ['a', 'b'] as const) {
      const label = group === 'a' ? t.a.label : t.b.label;
      const values = [...new Set(answers.filter((x) => x.condition === label).map((x) => x.value))];
      if (values.length > 0) out.push({ flag: 'influential_point', group, values, expected: 0 });
    }
  }
  return out;
}

/** The answers behind the outlier and influential-answer flags; null when neither flag is raised. */
export async function flaggedAnswers(store: Store, t: ComparisonTarget, flags: readonly Flag[], includeExcluded: boolean): Promise<FlaggedAnswers | null> {
  const wanted = wantedOf(t, flags);
  if (wanted.length === 0) return null;
  const read = store.responses.getAnswersWithValues?.bind(store.responses);
  if (!read) return { answers: [], truncated: false, limitPerGroup: ANSWERS_PER_GROUP, reason: 'This storage engine cannot list the answers behind a flag.' };
  const answers: FlaggedAnswer[] = [];
  let truncated = false;
  for (const w of wanted) {
    const condition = w.group === 'a' ? t.a : t.b;
    const rows = await read(t.measure.key, condition.key, w.values, includeExcluded, ANSWERS_PER_GROUP);
    if (rows.length >= ANSWERS_PER_GROUP && (w.expected === 0 || w.expected > rows.length)) truncated = true;
    for (const r of rows) answers.push({ flag: w.flag, group: w.group, condition: condition.id, ...r });
  }
  return { answers, truncated, limitPerGroup: ANSWERS_PER_GROUP };
}
