/**
 * Schemas of the omnibus route (three or more conditions on one measure): the query string and the reply, which
 * mirrors stats' `ConditionsComparison` (stats/index.ts) plus the service's envelope (experiment, measure,
 * conditions, dataVersion, computedAt, margin). Every object that can hold a null quantity has an optional `reason`.
 */
import { z } from 'zod';
import { GroupSummarySchema } from './comparisons.js';
import { EquivalenceSchema, MarginQuery } from './equivalence.js';

const nullableNum = z.number().nullable();
const reason = z.string().optional().describe('Why a quantity above is null (plain sentence)');

const includeExcluded = z
  .enum(['true', 'false'])
  .default('false')
  .describe('true: excluded responses are counted in (default false: they are left out)');

export const OmnibusQuery = z.strictObject({ includeExcluded, margin: MarginQuery });

export const OmnibusChartQuery = z.strictObject({ includeExcluded });

export const OmnibusFlagSchema = z
  .object({
    code: z.enum(['omnibus_tests_disagree', 'one_condition_drives']),
    severity: z.enum(['info', 'warning']),
    message: z.string().describe('One to three plain sentences: what was seen and how to read the omnibus numbers'),
    detail: z.record(z.string(), z.unknown()).describe('The numbers behind the flag'),
  })
  .meta({ id: 'OmnibusFlag' });

export const OmnibusPairSchema = z
  .object({
    a: z.string().describe('Condition a (every difference is a − b); pairs run i < j in definition order'),
    b: z.string().describe('Condition b'),
    gamesHowell: z
      .object({
        meanDifference: nullableNum.describe('mean(a) − mean(b)'),
        se: nullableNum,
        t: nullableNum,
        df: nullableNum.describe('Welch–Satterthwaite df of the pair'),
        q: nullableNum.describe('Studentized range statistic √2·|t|'),
        p: nullableNum.describe('P(Q > q) from the studentized range with k conditions and the pair\'s df (adjusted for all pairs)'),
        reason,
      })
      .describe('Games–Howell (1976): Welch t per pair, p from the studentized range'),
    dunn: z
      .object({
        meanRankDifference: nullableNum.describe('mean rank of a − mean rank of b (ranks of all conditions pooled)'),
        z: nullableNum,
        p: nullableNum.describe('Two-sided p, unadjusted'),
        pHolm: nullableNum.describe('Two-sided p, Holm-adjusted over all pairs'),
        sidedness: z.literal('two-sided'),
        reason,
      })
      .describe("Dunn's (1964) test on the pooled ranks, with the tie correction"),
    equivalence: EquivalenceSchema.nullable().describe('Both TOST routes against the margin; null when no margin is known'),
  })
  .meta({ id: 'OmnibusPair' });

export const OmnibusSchema = z
  .object({
    experiment: z.string(),
    measure: z.string(),
    conditions: z.array(z.object({ id: z.string(), label: z.string() })).describe('Every condition, definition order (the order of groups)'),
    dataVersion: z.number().int().describe('The experiment data version these numbers belong to'),
    computedAt: z.string().describe('When these numbers were computed (a cached result keeps its time)'),
    alpha: z.number().describe("The experiment's significance level (flags and equivalence verdicts)"),
    margin: nullableNum.describe('The equivalence margin used (the ?margin= override, else the measure\'s), or null'),
    groups: z.array(GroupSummarySchema).describe('One summary per condition, definition order'),
    welchAnova: z
      .object({
        f: nullableNum,
        df1: nullableNum,
        df2: nullableNum.describe('Welch (1951) denominator df'),
        p: nullableNum,
        omegaSquared: nullableNum.describe('Effect size: est. ω² = df1·(F − 1)/(df1·(F − 1) + N), 0 when F < 1'),
        reason,
      })
      .describe("Welch's (1951) ANOVA: equal means without assuming equal variances"),
    classicAnova: z
      .object({
        f: nullableNum,
        df1: nullableNum,
        df2: nullableNum,
        p: nullableNum,
        etaSquared: nullableNum.describe('η² = SS_between / SS_total'),
        omegaSquared: nullableNum.describe('ω² = (SS_between − (k − 1)·MS_within) / (SS_total + MS_within)'),
        reason,
      })
      .describe('Classic one-way ANOVA (equal variances), for reference'),
    kruskalWallis: z
      .object({
        h: nullableNum.describe("H with the tie correction (R's Kruskal-Wallis chi-squared)"),
        df: nullableNum,
        p: nullableNum.describe('Upper tail of χ² with k − 1 df'),
        epsilonSquared: nullableNum.describe('Effect size ε² = H/(N − 1)'),
        tieCorrection: z.boolean(),
        meanRanks: z.array(nullableNum),
        reason,
      })
      .describe('Kruskal–Wallis (1952) rank test'),
    pairs: z.array(OmnibusPairSchema).describe('Every pair i < j'),
    flags: z.array(OmnibusFlagSchema),
  })
  .meta({
    id: 'Omnibus',
    description: "Welch's ANOVA, the classic ANOVA and the Kruskal–Wallis test across all conditions, then every pair (Games–Howell, Dunn)",
  });

export type OmnibusBody = z.infer<typeof OmnibusSchema>;
