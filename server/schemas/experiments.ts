/** Schemas of the experiment routes (request bodies and replies). */
import { z } from 'zod';
import { RESERVED_MEASURE_IDS } from '../ingest.js';
import { Slug } from './common.js';

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
  })
  .superRefine((m, ctx) => {
    if (!(m.min < m.max)) ctx.addIssue({ code: 'custom', path: ['max'], message: `must be greater than min (${m.min})` });
    else if (m.integer && (!Number.isInteger(m.min) || !Number.isInteger(m.max))) {
      ctx.addIssue({ code: 'custom', path: ['min'], message: 'an integer measure needs whole-number limits' });
    }
  });

function uniqueIds(items: { id: string }[], ctx: z.RefinementCtx, what: string): void {
  const seen = new Set<string>();
  items.forEach((item, i) => {
    if (seen.has(item.id)) ctx.addIssue({ code: 'custom', path: [i, 'id'], message: `repeats the ${what} id "${item.id}"` });
    seen.add(item.id);
  });
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
      .superRefine((a, ctx) => uniqueIds(a, ctx, 'measure')),
    plannedPerCondition: z.number().int().min(1).max(1_000_000_000).nullable().optional().describe('Planned responses per condition'),
    alpha: z.number().gt(0).max(0.5).default(0.05).describe('Significance level for comparisons (default 0.05)'),
    thankYouUrl: HttpUrl.nullable().optional().describe('Where a browser is sent after a successful form post'),
  })
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
        }),
      )
      .max(500)
      .optional()
      .describe("Changes to existing measures; min, max and integer cannot change once the measure has values"),
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
      z.object({ id: z.string(), label: z.string(), min: z.number(), max: z.number(), integer: z.boolean(), required: z.boolean() }),
    ),
    plannedPerCondition: z.number().int().nullable(),
    alpha: z.number(),
    thankYouUrl: z.string().nullable(),
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
