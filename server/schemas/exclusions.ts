/** Schemas of the exclusion, erasure and audit routes. */
import { z } from 'zod';
import { NO_CONTROL_CHARS, PathId } from './common.js';
import { RESPONSE_ID_PATTERN } from './responses.js';

export const ResponseParams = z.object({
  id: PathId,
  responseId: z.string().regex(RESPONSE_ID_PATTERN, 'is not a valid responseId').describe('The responseId given (or generated) at ingest'),
});

export const RespondentParams = z.object({
  id: PathId,
  respondent: z.string().min(1).max(256).regex(NO_CONTROL_CHARS, 'must not contain control characters').describe('The respondent reference sent with the responses (URL-encoded)'),
});


export const ExclusionInputSchema = z
  .strictObject({
    reason: z
      .string()
      .trim()
      .min(1, 'must say why the response is excluded')
      .max(500)
      .regex(NO_CONTROL_CHARS, 'must not contain control characters')
      .describe('Why the response is left out, e.g. "failed attention check" (kept in the audit trail)'),
  })
  .meta({ id: 'ExclusionRequest', example: { reason: 'failed attention check' } });

export const ExclusionSchema = z
  .object({
    responseId: z.string(),
    condition: z.string(),
    excluded: z.boolean().describe('The state after the request'),
    reason: z.string().nullable().describe('Why it is excluded (null when it is not)'),
    changed: z.boolean().describe('false: the response already was in this state; nothing was written and dataVersion did not move'),
    dataVersion: z.number().int(),
  })
  .meta({ id: 'Exclusion' });

export const ErasureSchema = z
  .object({
    erased: z.number().int().describe('Responses deleted (0 when the respondent has none: the request is still answered and audited)'),
    dataVersion: z.number().int(),
  })
  .meta({ id: 'Erasure' });

export const AuditEntrySchema = z
  .object({
    id: z.number().int(),
    action: z
      .enum(['exclude', 'restore', 'erase', 'primary-change'])
      .describe('primary-change: the primary outcome was changed after answers existed (fromMeasure → toMeasure)'),
    responseId: z.string().nullable().describe('null for an erasure, a primary-change, and for earlier rows of responses erased since (redacted)'),
    reason: z.string().nullable(),
    count: z.number().int().describe('Responses affected (exclude/restore: 1; erase: the number erased); primary-change: the responses stored at the time'),
    apiKeyId: z.number().int().nullable().describe('The key that made the change'),
    at: z.string(),
    dataVersion: z.number().int().describe('The data version after the change (a primary-change does not move it)'),
    redacted: z.boolean(),
    fromMeasure: z.string().nullable().describe('primary-change: the primary measure before (null: none); null for other actions'),
    toMeasure: z.string().nullable().describe('primary-change: the primary measure after (null: none); null for other actions'),
  })
  .meta({ id: 'AuditEntry' });

export const AuditListSchema = z.object({ entries: z.array(AuditEntrySchema) }).meta({ id: 'AuditList' });
