/** Schemas of the ingest routes: one response, a batch, and what the service answers. */
import { z } from 'zod';
import { NO_CONTROL_CHARS, PathId } from './common.js';

/** Name of the form field that may carry an ingest key (never an admin or read key). */
export const FORM_KEY_FIELD = 'ingestKey';
/** Form fields that are not measures. */
export const FORM_RESERVED_FIELDS = ['condition', 'responseId', 'respondent', 'submittedAt', FORM_KEY_FIELD] as const;
/** Measure ids that cannot be used, because a form field of that name means something else. */
export const RESERVED_MEASURE_IDS = ['condition', 'respondent'] as const;

/** Client response ids: URL-safe, 1–128 characters (they appear in later URLs such as …/responses/{responseId}/exclusion). */
export const RESPONSE_ID_PATTERN = /^[A-Za-z0-9][A-Za-z0-9._~:-]{0,127}$/;
export const MAX_BATCH_ITEMS = 10_000;
/** Body limits: one response (JSON or form) and a batch. */
export const SINGLE_BODY_LIMIT = 1024 * 1024;
export const BATCH_BODY_LIMIT = 16 * 1024 * 1024;


export const ResponseInputSchema = z
  .strictObject({
    responseId: z
      .string()
      .regex(RESPONSE_ID_PATTERN, 'must be 1–128 characters: letters, digits, ".", "_", "~", ":" or "-", starting with a letter or digit')
      .optional()
      .describe('Client id for safe retries: the same id with the same content is stored once. Generated when absent.'),
    condition: z.string().max(200).describe('Id of the condition this respondent saw'),
    respondent: z
      .string()
      .min(1)
      .max(256)
      .regex(NO_CONTROL_CHARS, 'must not contain control characters')
      .nullable()
      .optional()
      .describe('Optional reference to the respondent (used for erasure requests); at most 256 characters'),
    submittedAt: z.iso
      .datetime({ offset: true, message: 'must be an ISO 8601 date-time with a time zone, e.g. 2027-03-01T12:00:00Z' })
      .optional()
      .describe('When the respondent submitted (client clock); defaults to the time the service received it'),
    weight: z
      .unknown()
      .optional()
      .meta({
        type: ['number', 'null'],
        description:
          'Survey weight of this response (experiments declared with weights "optional" or "required"): a finite number > 0 and ' +
          'at most the definition\'s maxWeight (default 1e6). Refused in an experiment without weights; required with "required". ' +
          'Part of the content a retry must repeat.',
      }),
    values: z
      .record(z.string(), z.unknown())
      .meta({
        additionalProperties: { type: 'number' },
        description:
          'One finite number per measure id, within the measure\'s [min, max] and whole for integer measures. ' +
          'A measure that is not required may be omitted or null. Numbers longer than 40 characters are refused.',
      }),
  })
  .meta({ id: 'ResponseSubmission' });

export const BatchInputSchema = z
  .strictObject({
    responses: z.array(ResponseInputSchema).min(1).max(MAX_BATCH_ITEMS),
  })
  .meta({ id: 'BatchSubmission' });

/** What the handler validates the batch envelope with (items are checked one by one, so every problem is listed). */
export const BatchEnvelopeSchema = z.strictObject({
  responses: z
    .array(z.unknown())
    .min(1, 'must contain at least one response')
    .max(MAX_BATCH_ITEMS, `must contain at most ${MAX_BATCH_ITEMS} responses`),
});

export const StoredResponseSchema = z
  .object({
    responseId: z.string(),
    condition: z.string(),
    respondent: z.string().nullable(),
    values: z.record(z.string(), z.number()),
    weight: z.number().nullable().optional().describe('The survey weight (experiments with weights only; null when none was given)'),
    submittedAt: z.string(),
    receivedAt: z.string(),
  })
  .meta({ id: 'StoredResponse' });

export const BatchResultSchema = z
  .object({
    created: z.number().int().describe('Responses stored by this request'),
    repeated: z.number().int().describe('Items that repeated an already stored response (same responseId and content)'),
    responseIds: z.array(z.string()).describe('The responseId of every item, in input order (generated where absent)'),
  })
  .meta({ id: 'BatchResult' });

export const ExperimentParams = z.object({ id: PathId });
