/**
 * Schema of the public form definition: GET /v1/experiments/{id}/form. Only what a survey page needs to check
 * answers before sending them — no title, no condition labels (either may describe the manipulation to the
 * respondent who reads the page's key), no measure labels, no counts, no dataVersion, no results.
 */
import { z } from 'zod';

export const FormMeasureSchema = z
  .object({
    id: z.string().describe('Measure id: the form field name and the key in `values`'),
    min: z.number(),
    max: z.number(),
    integer: z.boolean().describe('Whole numbers only'),
    required: z.boolean().describe('A response without this value is refused'),
  })
  .meta({ id: 'FormMeasure' });

export const FormDefinitionSchema = z
  .object({
    experiment: z.string().describe('Experiment id'),
    status: z.enum(['open', 'closed']).describe('A closed experiment refuses new responses and assignments'),
    conditions: z.array(z.string()).describe('Condition ids, in definition order'),
    measures: z.array(FormMeasureSchema).describe('In definition order'),
  })
  .meta({
    id: 'FormDefinition',
    example: {
      experiment: 'water-bill-2027',
      status: 'open',
      conditions: ['bill-first', 'service-first'],
      measures: [{ id: 'satisfaction', min: 0, max: 10, integer: true, required: true }],
    },
  });

export type FormDefinition = z.infer<typeof FormDefinitionSchema>;
