/** Schema of the team overview (GET /v1/overview): every study the key may see, with its headline numbers. */
import { z } from 'zod';

const nullableNum = z.number().nullable();
const estimate = z.object({ estimate: nullableNum, lower: nullableNum, upper: nullableNum, p: nullableNum });

export const OverviewStudySchema = z
  .object({
    id: z.string(),
    title: z.string(),
    status: z.enum(['open', 'closed']),
    dataVersion: z.number().int(),
    plannedPerCondition: z.number().int().nullable(),
    conditions: z.array(
      z.object({
        id: z.string(),
        label: z.string(),
        answers: z.number().int().describe('Responses counted in comparisons (excluded ones left out)'),
        excluded: z.number().int(),
        planned: z.number().int().nullable(),
        progress: nullableNum.describe('answers / planned (null without a planned size)'),
      }),
    ),
    answersToday: z.number().int().nullable().describe('Responses received since 00:00 UTC today (null: not available)'),
    answersThisWeek: z.number().int().nullable().describe('Responses received since Monday 00:00 UTC (ISO week)'),
    refusedValues: z.number().int().describe('Values refused at ingest (all items)'),
    warnings: z.number().int().describe('Quality flags of severity "warning" across the first pair of every item'),
    primary: z
      .object({
        measure: z.string(),
        label: z.string(),
        a: z.string(),
        b: z.string(),
        welch: estimate.describe('Mean difference a − b with its interval and p'),
        rankSum: estimate.describe('Hodges–Lehmann shift a − b with its interval and the rank-sum p'),
        anytimeValid: z
          .object({ p: nullableNum, lower: nullableNum, upper: nullableNum })
          .nullable()
          .describe('The anytime-valid p and confidence sequence (open studies only)'),
        changedAfterDataCollectionBegan: z.boolean(),
      })
      .nullable()
      .describe('The primary outcome, first pair (null: no primary outcome declared)'),
  })
  .meta({ id: 'OverviewStudy' });

export const OverviewSchema = z
  .object({
    generatedAt: z.string().describe('ISO 8601'),
    studies: z.array(OverviewStudySchema),
  })
  .meta({ id: 'Overview', description: "A team's studies with status, progress and the primary outcome's headline" });

export type OverviewBody = z.infer<typeof OverviewSchema>;
export type OverviewStudy = z.infer<typeof OverviewStudySchema>;
