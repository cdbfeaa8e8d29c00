/**
 * Schemas of the comparison routes: query strings and the reply, which mirrors stats' `Comparison` (stats/types.ts)
 * field for field plus the service's envelope (experiment, measure, a, b, dataVersion, computedAt, flags,
 * monitoring). Every object that can hold a null quantity also has an optional `reason` (the serializer keeps
 * only declared fields, so a field missing here would silently vanish from the reply).
 */
import { z } from 'zod';
import { PathId } from './common.js';
import { MonitoringSchema } from './monitoring.js';
import { EquivalenceSchema, MarginQuery } from './equivalence.js';
import { AdjustedBlockSchema, WeightedBlockSchema } from './weighted.js';
import { FlaggedAnswersSchema, SensitivitySchema } from './sensitivity.js';
import { MeasureRoleSchema } from './experiments.js';

const num = z.number();
const nullableNum = z.number().nullable();
const reason = z.string().optional().describe('Why a quantity above is null (plain sentence)');

export const IntervalSchema = z
  .object({
    level: num.describe('Confidence level'),
    lower: nullableNum.describe('Lower bound (null: unbounded, for a one-sided interval)'),
    upper: nullableNum.describe('Upper bound (null: unbounded)'),
    reason,
  })
  .meta({ id: 'Interval' });

export const GroupSummarySchema = z
  .object({
    n: z.number().int(),
    mean: nullableNum,
    sd: nullableNum.describe('Standard deviation (n − 1)'),
    median: nullableNum,
    q1: nullableNum.describe('First quartile (type 7, as R and numpy)'),
    q3: nullableNum,
    iqr: nullableNum,
    min: nullableNum,
    max: nullableNum,
    skewness: nullableNum.describe('g1 = m3 / m2^(3/2)'),
    excessKurtosis: nullableNum.describe('g2 = m4 / m2² − 3'),
    mad: nullableNum.describe("1.4826 · median absolute deviation (R's mad())"),
    shapiroWilk: z.object({ w: num, p: num }).nullable().describe('Shapiro–Wilk W and p (3 ≤ n ≤ 5000)'),
    reason,
  })
  .meta({ id: 'GroupSummary' });

export const TTestSchema = z
  .object({
    t: nullableNum,
    df: nullableNum,
    p: nullableNum,
    meanDifference: nullableNum.describe('mean(a) − mean(b)'),
    se: nullableNum,
    ci: IntervalSchema,
    reason,
  })
  .meta({ id: 'TTest' });

export const MannWhitneySchema = z
  .object({
    u: nullableNum.describe("U of a = #(a > b) + ½·#(a = b) (R's W, scipy's U1)"),
    z: nullableNum,
    p: nullableNum,
    method: z.enum(['exact', 'normal']),
    continuityCorrection: z.boolean(),
    tieCorrection: z.boolean(),
    reason,
  })
  .meta({ id: 'MannWhitney' });

export const HodgesLehmannSchema = z
  .object({
    estimate: nullableNum.describe('Median of all pairwise differences a_i − b_j'),
    ci: IntervalSchema.extend({ achievedLevel: nullableNum.describe('The level the interval really has (lattice of differences)') }),
    reason,
  })
  .meta({ id: 'HodgesLehmann' });

export const EffectSizesSchema = z
  .object({
    cohensD: nullableNum,
    hedgesG: nullableNum,
    hedgesGCi: IntervalSchema,
    rankBiserial: nullableNum.describe('2U/(n_a·n_b) − 1'),
    probabilityOfSuperiority: nullableNum.describe('U/(n_a·n_b) = P(A > B) + ½·P(A = B)'),
    reason,
  })
  .meta({ id: 'EffectSizes' });

export const RobustSchema = z
  .object({
    brunnerMunzel: z.object({ statistic: nullableNum, df: nullableNum, p: nullableNum, reason }),
    yuenWelch: z.object({
      trim: num,
      t: nullableNum,
      df: nullableNum,
      p: nullableNum,
      difference: nullableNum.describe('Trimmed mean of a − trimmed mean of b'),
      reason,
    }),
  })
  .meta({ id: 'RobustTests' });

export const FlagSchema = z
  .object({
    code: z.enum([
      'out_of_range',
      'outliers',
      'non_normal',
      'unequal_variance',
      'small_sample',
      'imbalanced',
      'allocation_mismatch',
      'tests_disagree',
      'influential_point',
      'heavy_ties',
      'floor_ceiling',
      'interim',
      'excluded',
      // survey weights (stats/weight-flags.ts)
      'unequal_weights',
      'dominant_weight',
      'weighting_changes_conclusion',
    ]),
    severity: z.enum(['info', 'warning']),
    message: z.string().describe('One to three plain sentences: what was seen and what it means for which test'),
    detail: z.record(z.string(), z.unknown()).describe('The numbers behind the flag (counts, thresholds, values)'),
  })
  .meta({ id: 'Flag' });

const comparisonShape = {
  experiment: z.string(),
  measure: z.string(),
  a: z.string().describe('Condition a (every difference is a − b)'),
  b: z.string().describe('Condition b'),
  dataVersion: z.number().int().describe('The experiment data version these numbers belong to'),
  computedAt: z.string().describe('When these numbers were computed (a cached result keeps its time)'),
  groups: z.object({ a: GroupSummarySchema, b: GroupSummarySchema }),
  welch: TTestSchema.describe("Welch's t-test (unequal variances)"),
  student: TTestSchema.describe('Pooled-variance t-test, for reference'),
  mannWhitney: MannWhitneySchema.describe('Wilcoxon–Mann–Whitney rank-sum test'),
  hodgesLehmann: HodgesLehmannSchema,
  effectSizes: EffectSizesSchema,
  robust: RobustSchema,
  flags: z.array(FlagSchema),
  monitoring: MonitoringSchema.nullable().describe('Interim monitoring that stays valid however often you look'),
  equivalence: EquivalenceSchema.nullable().describe(
    "Two one-sided tests against the equivalence margin (?margin=, else the measure's equivalenceMargin); null when no margin is known",
  ),
  weighted: WeightedBlockSchema.nullable().describe('The comparison with survey weights (experiments with weights); null otherwise'),
  sensitivity: SensitivitySchema.nullable().describe('Both tests without the far-out answers, winsorised, and without the most influential answer'),
  flaggedAnswers: FlaggedAnswersSchema.nullable().describe('The answers behind the outlier and influential-answer flags (null: neither flag is raised)'),
};

export const ComparisonSchema = z.object({
  ...comparisonShape,
  adjusted: AdjustedBlockSchema.optional().describe('Covariate-adjusted difference (only when ?covariates= asks for it)'),
}).meta({
  id: 'Comparison',
  description: 'Both tests, estimates, effect sizes and quality flags for one measure and one pair of conditions',
});

export const AdjustedSchema = z
  .object({
    welchP: nullableNum.describe('Welch p adjusted across the whole family'),
    mannWhitneyP: nullableNum.describe('Rank-sum p adjusted across the whole family'),
    method: z.enum(['holm', 'bh', 'none']),
    reason: z.string().optional().describe('Why the adjusted p-values are null (e.g. a process measure, outside the family)'),
  })
  .meta({ id: 'AdjustedP' });

export const FamilyEntrySchema = z
  .object({
    ...comparisonShape,
    role: MeasureRoleSchema.describe("The measure's role; only outcome measures are in the adjusted family"),
    primary: z.boolean().describe('The primary outcome'),
    adjusted: AdjustedSchema,
  })
  .meta({ id: 'FamilyComparison' });

export const FamilySchema = z
  .object({
    experiment: z.string(),
    dataVersion: z.number().int().describe('The data version every entry belongs to (see the README when they differ)'),
    adjust: z.enum(['holm', 'bh', 'none']),
    pairs: z.enum(['first', 'all']),
    adjustedFamily: z
      .object({
        roles: z.array(z.enum(['outcome'])).describe('Roles whose comparisons form the adjusted family'),
        measures: z.array(z.string()).describe('Measures in the adjusted family'),
        size: z.number().int().describe('Comparisons adjusted together'),
        description: z.string().describe('Which family was adjusted, in words'),
      })
      .describe('Which comparisons the adjustment covered (outcome measures only)'),
    comparisons: z.array(FamilyEntrySchema),
  })
  .meta({ id: 'ComparisonFamily' });

/**
 * The interval levels a request may ask for. A closed set keeps the cache effective: any level in (0, 1) would let a
 * client make every request a cache miss (one full computation each) just by changing the level.
 */
export const CONFIDENCE_LEVELS: readonly number[] = Object.freeze([0.5, 0.8, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999]);

const includeExcluded = z
  .enum(['true', 'false'])
  .default('false')
  .describe('true: excluded responses are counted in (default false: they are left out)');

const commonQuery = {
  alternative: z.enum(['two-sided', 'less', 'greater']).default('two-sided').describe('"greater": a tends to be larger than b'),
  confidenceLevel: z.coerce
    .number({ message: 'must be a number strictly between 0 and 1' })
    .gt(0, 'must be a number strictly between 0 and 1')
    .lt(1, 'must be a number strictly between 0 and 1')
    .refine((v) => v <= 0 || v >= 1 || CONFIDENCE_LEVELS.includes(v), `must be one of ${CONFIDENCE_LEVELS.join(', ')}`)
    .default(0.95).describe(`Level of every interval: one of ${CONFIDENCE_LEVELS.join(', ')} (default 0.95)`),
  includeExcluded,
};

export const ComparisonParams = z.object({ id: PathId, measure: PathId });

export const ComparisonQuery = z.strictObject({
  a: PathId.optional().describe('Condition id; defaults to the first condition when the experiment has exactly two'),
  b: PathId.optional().describe('Condition id; defaults to the other condition when the experiment has exactly two'),
  ...commonQuery,
  margin: MarginQuery,
  covariates: z
    .string()
    .max(2000)
    .optional()
    .describe('Comma-separated ids of measures declared as covariates: adds the `adjusted` block (Lin 2013, HC2); an unknown or non-covariate id → 422'),
});

export const ChartQuery = z.strictObject({
  a: ComparisonQuery.shape.a,
  b: ComparisonQuery.shape.b,
  includeExcluded,
  range: z
    .enum(['scale', 'data'])
    .default('scale')
    .describe("scale (default): the axis spans the whole scale; data: the answers' range, marked when it does not start at the scale's minimum"),
});

export const FamilyQuery = z.strictObject({
  pairs: z.enum(['first', 'all']).default('first').describe('first: the first two conditions; all: every pair of conditions'),
  adjust: z.enum(['holm', 'bh', 'none']).default('holm').describe('holm (Holm 1979, default), bh (Benjamini–Hochberg 1995) or none'),
  ...commonQuery,
  includeCovariates: z
    .enum(['true', 'false'])
    .default('false')
    .describe('true: compare the measures declared as covariates too (default false: outcomes only)'),
});

export type ComparisonBody = z.infer<typeof ComparisonSchema>;
export type FamilyBody = z.infer<typeof FamilySchema>;
export type FamilyEntry = z.infer<typeof FamilyEntrySchema>;
