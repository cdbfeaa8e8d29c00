/** Schemas of the experiment routes (request bodies and replies). */
import { z } from 'zod';
import { marginProblem } from './equivalence.js';
import { RESERVED_MEASURE_IDS } from './responses.js';
import { Slug } from './common.js';
import { MaxWeightSchema, WEIGHT_FIELD, WeightsPolicySchema } from './weights.js';

const Label = z.string().min(1).max(500);

const HttpUrl = z
  .string()
  .max(2000)
  .refine((s) => {
    try {
      const u = new URL(s);
      return u.protocol === 'https:' || u.protocol === 'http:';
    } catch {
      return false;
    }
  }, 'must be an absolute http:// or https:// URL');

const ConditionInput = z.strictObject({
  id: Slug,
  label: Label.optional().describe('Defaults to the id'),
});

const EquivalenceMarginInput = z
  .number()
  .describe(
    "The smallest difference between conditions that matters, in the item's units (e.g. 0.5 on a 0–10 scale): positive and " +
      'smaller than max − min. Choose it before seeing the data. When set, every pairwise comparison carries equivalence tests.',
  );
/** What a measure is for: an outcome compared between conditions (the adjusted family), a covariate asked before the
 * treatment (used to adjust comparisons), or a process measure (time spent, device type, …: compared, never adjusted). */
export const MeasureRoleSchema = z
  .enum(['outcome', 'covariate', 'process'])
  .describe(
    '"outcome" (default): compared and in the adjusted family; "covariate": asked before the treatment, used to adjust ' +
      'comparisons (?covariates=), not compared unless asked; "process" (time spent, device type, …): compared but never ' +
      'adjusted with the outcomes. Fixed when the experiment is created.',
  );

const MeasureInput = z
  .strictObject({
    id: Slug.refine((s) => !(RESERVED_MEASURE_IDS as readonly string[]).includes(s), {
      message: `must not be ${RESERVED_MEASURE_IDS.join(' or ')} (those names are form fields)`,
    }),
    label: Label.optional().describe('Defaults to the id'),
    min: z.number().describe('Smallest allowed value (finite)'),
    max: z.number().describe('Largest allowed value (finite, > min)'),
    integer: z.boolean().default(false).describe('Whole numbers only (default false)'),
    required: z.boolean().default(true).describe('Every response must answer it (default true)'),
    equivalenceMargin: EquivalenceMarginInput.optional(),
    role: MeasureRoleSchema.default('outcome'),
    primary: z.boolean().default(false).describe('The primary outcome (at most one per experiment; shown first)'),
  })
  .superRefine((m, ctx) => {
    if (!(m.min < m.max)) ctx.addIssue({ code: 'custom', path: ['max'], message: `must be greater than min (${m.min})` });
    else if (m.integer && (!Number.isInteger(m.min) || !Number.isInteger(m.max))) {
      ctx.addIssue({ code: 'custom', path: ['min'], message: 'an integer measure needs whole-number limits' });
    }
    if (m.min < m.max && m.equivalenceMargin !== undefined) {
      const problem = marginProblem(m.equivalenceMargin, m);
      if (problem) ctx.addIssue({ code: 'custom', path: ['equivalenceMargin'], message: problem });
    }
  });

function uniqueIds(items: { id: string }[], ctx: z.RefinementCtx, what: string): void {
  const seen = new Set<string>();
  items.forEach((item, i) => {
    if (seen.has(item.id)) ctx.addIssue({ code: 'custom', path: [i, 'id'], message: `repeats the ${what} id "${item.id}"` });
    seen.add(item.id);
  });
}

/** At most one primary measure, and it must be an outcome. */
function checkPrimary(items: { role?: string; primary?: boolean }[], ctx: z.RefinementCtx): void {
  let seen = -1;
  items.forEach((m, i) => {
    if (m.primary !== true) return;
    if (seen >= 0) ctx.addIssue({ code: 'custom', path: [i, 'primary'], message: `only one measure can be primary (measures[${seen}] already is)` });
    else seen = i;
    if (m.role !== undefined && m.role !== 'outcome') ctx.addIssue({ code: 'custom', path: [i, 'primary'], message: 'a primary measure must have the role "outcome"' });
  });
}

/** Per-experiment overrides of the quality-flag thresholds (defaults and sources: stats/flags.ts, README "Reading a comparison"). */
export const FlagThresholdsSchema = z
  .strictObject({
    tukeyMultiplier: z.number().gt(0).max(100).optional().describe("Tukey's fence multiplier (default 1.5)"),
    farOutMultiplier: z.number().gt(0).max(100).optional().describe('"Far out" fence multiplier (default 3)'),
    madMultiplier: z.number().gt(0).max(100).optional().describe('Scaled MADs from the median (default 2.5)'),
    normalityP: z.number().gt(0).lt(1).optional().describe('Shapiro–Wilk p below which non_normal is raised (default 0.05)'),
    skewness: z.number().gt(0).max(100).optional().describe('|skewness| above which non_normal is raised beyond n = 5000 (default 1)'),
    largeN: z.number().int().min(2).max(1_000_000_000).optional().describe('Group size from which non_normal is only info (default 100)'),
    sdRatio: z.number().gt(1).max(1000).optional().describe('SD ratio above which unequal_variance is raised (default 2)'),
    smallN: z.number().int().min(1).max(1_000_000).optional().describe('Group size below which small_sample is raised (default 20)'),
    imbalanceRatio: z.number().gt(1).max(1000).optional().describe('Size ratio above which imbalanced is raised (default 1.5)'),
    allocationP: z.number().gt(0).lt(1).optional().describe('Chi-square p below which allocation_mismatch is raised (default 0.001)'),
    tieFraction: z.number().gt(0).lt(1).optional().describe('Share of tied answers above which heavy_ties is raised (default 0.5)'),
    floorCeilingFraction: z.number().gt(0).lt(1).optional().describe('Share at a scale end above which floor_ceiling is raised (default 0.15)'),
  })
  .meta({ id: 'FlagThresholds' });

/** Group-sequential monitoring: which Lan–DeMets spending function the recorded looks use. */
export const MonitoringOptionSchema = z
  .strictObject({
    spending: z.enum(['obrien-fleming', 'pocock']).describe('Alpha-spending function for recorded interim looks'),
  })
  .meta({ id: 'MonitoringOption' });

/** Planned allocation: a positive weight per condition id (equal when absent). */
export const AllocationSchema = z
  .record(z.string(), z.number().gt(0).max(1_000_000))
  .describe('Planned allocation weight per condition id, e.g. {"bill-first": 1, "service-first": 1}; equal when absent');

function checkAllocation(
  allocation: Record<string, number> | null | undefined,
  conditions: readonly { id: string }[],
  ctx: z.RefinementCtx,
): void {
  if (!allocation) return;
  const ids = new Set(conditions.map((c) => c.id));
  for (const key of Object.keys(allocation)) {
    if (!ids.has(key)) ctx.addIssue({ code: 'custom', path: ['allocation', key], message: `is not a condition of this experiment` });
  }
  for (const id of ids) {
    if (!(id in allocation)) ctx.addIssue({ code: 'custom', path: ['allocation'], message: `needs a weight for every condition (missing "${id}")` });
  }
}

function checkWeights(e: { weights: string; maxWeight?: number; measures: { id: string }[] }, ctx: z.RefinementCtx): void {
  if (e.weights === 'none' && e.maxWeight !== undefined) {
    ctx.addIssue({ code: 'custom', path: ['maxWeight'], message: 'needs weights "optional" or "required"' });
  }
  if (e.weights !== 'none') {
    e.measures.forEach((m, i) => {
      if (m.id === WEIGHT_FIELD) {
        ctx.addIssue({ code: 'custom', path: ['measures', i, 'id'], message: `must not be "${WEIGHT_FIELD}" in an experiment with weights (that name is the weight's field)` });
      }
    });
  }
}

export const ExperimentInputSchema = z
  .strictObject({
    id: Slug.describe('Lowercase slug, e.g. water-bill-2027'),
    title: Label,
    conditions: z
      .array(ConditionInput)
      .min(2, 'needs at least two conditions')
      .max(50)
      .superRefine((a, ctx) => uniqueIds(a, ctx, 'condition')),
    measures: z
      .array(MeasureInput)
      .min(1, 'needs at least one measure')
      .max(500)
      .superRefine((a, ctx) => {
        uniqueIds(a, ctx, 'measure');
        checkPrimary(a, ctx);
      }),
    plannedPerCondition: z.number().int().min(1).max(1_000_000_000).nullable().optional().describe('Planned responses per condition'),
    alpha: z.number().gt(0).max(0.5).default(0.05).describe('Significance level for comparisons (default 0.05)'),
    thankYouUrl: HttpUrl.nullable().optional().describe('Where a browser is sent after a successful form post'),
    flagThresholds: FlagThresholdsSchema.optional(),
    monitoring: MonitoringOptionSchema.nullable().optional().describe('Group-sequential interim looks (POST …/looks) with this spending function'),
    allocation: AllocationSchema.nullable().optional(),
    weights: WeightsPolicySchema.default('none'),
    maxWeight: MaxWeightSchema.optional(),
  })
  .superRefine((e, ctx) => checkAllocation(e.allocation, e.conditions, ctx))
  .superRefine((e, ctx) => checkWeights(e, ctx))
  .meta({ id: 'ExperimentDefinition' });

export const ExperimentPatchSchema = z
  .strictObject({
    title: Label.optional(),
    status: z.enum(['open', 'closed']).optional().describe('A closed experiment refuses new responses (409)'),
    plannedPerCondition: z.number().int().min(1).max(1_000_000_000).nullable().optional(),
    alpha: z.number().gt(0).max(0.5).optional(),
    thankYouUrl: HttpUrl.nullable().optional(),
    measures: z
      .array(
        z.strictObject({
          id: Slug,
          label: Label.optional(),
          min: z.number().optional(),
          max: z.number().optional(),
          integer: z.boolean().optional(),
          required: z.boolean().optional(),
          equivalenceMargin: EquivalenceMarginInput.nullable().optional().describe('New equivalence margin; null removes it'),
          primary: z.boolean().optional().describe('true: this becomes the primary outcome; false on the primary one: none is'),
        }),
      )
      .max(500)
      .superRefine(checkPrimary)
      .optional()
      .describe("Changes to existing measures; min, max and integer cannot change once the measure has values"),
    flagThresholds: FlagThresholdsSchema.nullable().optional().describe('Replaces the flag thresholds; null restores the defaults'),
  })
  .refine((p) => Object.keys(p).length > 0, { message: 'must change at least one field' })
  .meta({ id: 'ExperimentPatch' });

export const ConditionCountSchema = z.object({
  condition: z.string(),
  responses: z.number().int().describe('Stored responses (excluded ones included)'),
  excluded: z.number().int(),
});

export const ExperimentSchema = z
  .object({
    id: z.string(),
    title: z.string(),
    status: z.enum(['open', 'closed']),
    conditions: z.array(z.object({ id: z.string(), label: z.string() })),
    measures: z.array(
      z.object({
        id: z.string(),
        label: z.string(),
        min: z.number(),
        max: z.number(),
        integer: z.boolean(),
        required: z.boolean(),
        equivalenceMargin: z.number().nullable().describe('The declared equivalence margin (item units), or null'),
        role: MeasureRoleSchema,
        primary: z.boolean().describe('The primary outcome'),
      }),
    ),
    primaryChanges: z
      .array(
        z.object({
          from: z.string().nullable(),
          to: z.string().nullable(),
          at: z.string().describe('ISO 8601 time of the change'),
          dataVersion: z.number().int().describe('The data version when the primary outcome changed (> 0: after data collection began)'),
          apiKeyId: z.number().int().nullable().describe('The key that made the change'),
        }),
      )
      .describe('Changes of the primary outcome made after answers existed (oldest first)'),
    plannedPerCondition: z.number().int().nullable(),
    alpha: z.number(),
    thankYouUrl: z.string().nullable(),
    flagThresholds: FlagThresholdsSchema.nullable(),
    monitoring: MonitoringOptionSchema.nullable(),
    allocation: z.record(z.string(), z.number()).nullable(),
    weights: WeightsPolicySchema,
    maxWeight: z.number().nullable().describe('Largest weight accepted; null when the experiment takes no weights'),
    dataVersion: z.number().int().describe('Moves forward with every accepted response, exclusion or erasure'),
    createdAt: z.string(),
    updatedAt: z.string(),
    counts: z.object({
      responses: z.number().int(),
      excluded: z.number().int(),
      byCondition: z.array(ConditionCountSchema),
    }),
  })
  .meta({ id: 'Experiment' });

export const ExperimentListSchema = z.object({ experiments: z.array(ExperimentSchema) }).meta({ id: 'ExperimentList' });

export type ExperimentInput = z.infer<typeof ExperimentInputSchema>;
export type ExperimentPatchInput = z.infer<typeof ExperimentPatchSchema>;
export type ExperimentView = z.infer<typeof ExperimentSchema>;
