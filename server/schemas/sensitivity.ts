/**
 * Schema of the comparison's `sensitivity` block (stats/sensitivity.ts): both tests recomputed without the far-out
 * answers, with the values winsorised at the fences, and without the single most influential answer, beside the
 * full-data result. A view, not a recommendation to drop data.
 */
import { z } from 'zod';

const nullableNum = z.number().nullable();
const reason = z.string().optional().describe('Why a quantity above is null (plain sentence)');

export const SensitivityResultSchema = z
  .object({
    n: z.object({ a: z.number().int(), b: z.number().int() }),
    welch: z
      .object({
        estimate: nullableNum.describe('mean(a) − mean(b)'),
        lower: nullableNum,
        upper: nullableNum,
        p: nullableNum,
        reason,
      })
      .describe("Welch's t-test on this version of the data"),
    rankSum: z
      .object({
        estimate: nullableNum.describe('Hodges–Lehmann shift (median of pairwise differences a − b)'),
        lower: nullableNum,
        upper: nullableNum,
        p: nullableNum.describe('Rank-sum p'),
        reason,
      })
      .describe('Rank-sum test and Hodges–Lehmann interval on this version of the data'),
  })
  .meta({ id: 'SensitivityResult' });

const fences = z.object({ low: z.number(), high: z.number() }).nullable();

export const SensitivityScenarioSchema = z
  .object({
    code: z.enum(['without_far_out', 'winsorised', 'without_most_influential']),
    description: z.string().describe('What was done to the data, in words'),
    result: SensitivityResultSchema.nullable().describe('null when the scenario does not apply (see reason)'),
    affected: z.object({ a: z.number().int(), b: z.number().int() }).describe('Answers left out (or moved to a fence) per group'),
    values: z
      .array(z.object({ group: z.enum(['a', 'b']), value: z.number(), count: z.number().int() }))
      .describe('The values concerned (up to 10 per group, most extreme first)'),
    fences: z.object({ a: fences, b: fences }).nullable().describe('Fences used per group (null: the group has none)'),
    conclusionChanges: z
      .object({ welch: z.boolean(), rankSum: z.boolean() })
      .describe("True when the test's p falls on the other side of alpha than with the full data"),
    sentence: z.string().nullable().describe('One plain sentence when a conclusion changes; null otherwise'),
    reason,
  })
  .meta({ id: 'SensitivityScenario' });

export const SensitivitySchema = z
  .object({
    alpha: z.number(),
    full: SensitivityResultSchema,
    scenarios: z.array(SensitivityScenarioSchema),
    note: z.string().describe('A view, not a recommendation to drop data'),
  })
  .meta({ id: 'Sensitivity', description: 'What the extreme answers do to both tests (a view, not a recommendation to drop data)' });

export const FlaggedAnswersSchema = z
  .object({
    answers: z.array(
      z.object({
        flag: z.enum(['outliers', 'influential_point']).describe('The flag this answer is behind'),
        group: z.enum(['a', 'b']),
        condition: z.string().describe('Condition id'),
        responseId: z.string(),
        value: z.number(),
        receivedAt: z.string().describe('ISO 8601 arrival time'),
        excluded: z.boolean(),
      }),
    ),
    truncated: z.boolean().describe('True when more answers have the flagged values than were listed'),
    limitPerGroup: z.number().int().describe('At most this many answers per flag and condition'),
    reason: z.string().optional().describe('Why no answers are listed'),
  })
  .meta({ id: 'FlaggedAnswers', description: 'The stored answers behind the outlier and influential-answer flags (read and admin keys)' });
