/**
 * Schemas of the two optional blocks of a comparison reply: `weighted` (survey weights; present in every comparison of
 * an experiment with weights, null otherwise) and `adjusted` (covariate adjustment, when ?covariates= asks for it).
 * They mirror stats/weighted-comparison.ts and stats/covariate-adjustment.ts field for field.
 */
import { z } from 'zod';

const num = z.number();
const nullableNum = z.number().nullable();
const reason = z.string().optional().describe('Why a quantity above is null (plain sentence)');

// The interval and t-test shapes of comparisons.ts, repeated here without their ids (comparisons.ts imports this
// file, so importing them back would be a cycle).
const IntervalSchema = z.object({
  level: num.describe('Confidence level'),
  lower: nullableNum.describe('Lower bound (null: unbounded, for a one-sided interval)'),
  upper: nullableNum.describe('Upper bound (null: unbounded)'),
  reason,
});

const TTestSchema = z.object({
  t: nullableNum,
  df: nullableNum,
  p: nullableNum,
  meanDifference: nullableNum.describe('weighted mean(a) − weighted mean(b)'),
  se: nullableNum,
  ci: IntervalSchema,
  reason,
});

export const WeightedGroupSchema = z
  .object({
    n: z.number().int().describe('Answers with a weight (the design sample size)'),
    withoutWeight: z.number().int().describe('Answers of this group whose response carries no weight (left out of the weighted block)'),
    totalWeight: num.describe('Σw: the population size these answers stand for'),
    mean: nullableNum.describe('Weighted mean Σwy/Σw'),
    sd: nullableNum.describe('√(n/(n−1) · Σw(y−ȳ)²/Σw), as R survey::svyvar'),
    q1: nullableNum.describe('Weighted first quartile (lower inverse of the weighted CDF)'),
    median: nullableNum,
    q3: nullableNum,
    min: nullableNum,
    max: nullableNum,
    effectiveN: nullableNum.describe("Kish's effective sample size (Σw)²/Σw²"),
    designEffect: nullableNum.describe("Kish's design effect of unequal weighting n·Σw²/(Σw)²"),
    maxWeight: nullableNum.describe('Largest single weight (a lower bound when maxWeightExact is false)'),
    maxWeightShare: nullableNum.describe("Largest weight's share of Σw"),
    maxWeightExact: z.boolean(),
    reason,
  })
  .meta({ id: 'WeightedGroupSummary' });

export const WeightedRankTestSchema = z
  .object({
    estimate: nullableNum.describe('Difference in weighted mean mid-rank score a − b (ranks on the 0–1 scale of the estimated CDF)'),
    se: nullableNum,
    t: nullableNum,
    df: nullableNum,
    p: nullableNum,
    alternative: z.enum(['two-sided', 'less', 'greater']),
    reason,
  })
  .meta({ id: 'WeightedRankTest' });

export const WeightedBlockSchema = z
  .object({
    groups: z.object({ a: WeightedGroupSchema, b: WeightedGroupSchema }),
    tTest: TTestSchema.describe(
      'Design-based t test of the weighted mean difference a − b: linearised standard error, df = n − 2 (R: survey::svyttest on svydesign(id = ~1, weights = ~w))',
    ),
    rankTest: WeightedRankTestSchema.describe('Design-based rank test (Lumley & Scott 2013) on pooled weighted mid-ranks'),
    monitoring: z.string().describe('One sentence: interim monitoring uses the unweighted answers'),
  })
  .meta({ id: 'WeightedComparison', description: 'The comparison with survey weights: estimates for the population the weights stand for' });

export const RegressionEstimateSchema = z
  .object({
    estimate: nullableNum.describe('Difference a − b'),
    se: nullableNum.describe('HC2 standard error'),
    t: nullableNum,
    df: nullableNum.describe('n − p'),
    p: nullableNum,
    ci: IntervalSchema,
    reason,
  })
  .meta({ id: 'RegressionEstimate' });

export const AdjustedBlockSchema = z
  .object({
    covariates: z.array(z.string()).describe('The covariates adjusted for, as asked'),
    adjusted: RegressionEstimateSchema.describe("Lin's (2013) fully interacted regression estimate with the HC2 standard error"),
    unadjusted: RegressionEstimateSchema.describe('Difference in means on the same rows, HC2 standard error (equals Welch\'s), df = n − 2'),
    narrowingPercent: nullableNum.describe('How much adjustment narrowed the interval, in percent (negative: it widened)'),
    n: z.number().int().describe('Rows used (both conditions)'),
    nA: z.number().int(),
    nB: z.number().int(),
    covariateCount: z.number().int(),
    parameterCount: z.number().int().describe('p = 2 + 2k'),
    missing: z.object({
      rule: z.literal('complete-cases').describe('A row with any covariate missing is left out of both fits'),
      droppedRows: z.number().int(),
      droppedA: z.number().int(),
      droppedB: z.number().int(),
      perCovariate: z.array(z.object({ name: z.string(), missing: z.number().int() })),
    }),
    reason,
  })
  .meta({ id: 'CovariateAdjustment', description: 'The difference a − b adjusted for covariates asked before the split, beside the unadjusted one' });

export type WeightedBlock = z.infer<typeof WeightedBlockSchema>;
export type AdjustedBlock = z.infer<typeof AdjustedBlockSchema>;
