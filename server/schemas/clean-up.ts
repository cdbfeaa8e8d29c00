/** Schemas of the bulk clean-up route (exclude or erase the answers of a time window and/or an API key). */
import { z } from 'zod';
import { NO_CONTROL_CHARS } from './common.js';

const instant = z.iso
  .datetime({ offset: true, message: 'must be an ISO 8601 date-time with a time zone, e.g. 2027-03-01T12:00:00Z' })
  .describe('Compared with each response\'s receivedAt (inclusive)');

export const CleanUpInputSchema = z
  .strictObject({
    action: z.enum(['exclude', 'erase']).describe('exclude: leave the answers out of comparisons (restorable one by one); erase: delete them'),
    reason: z
      .string()
      .trim()
      .min(1, 'must say why, e.g. "form key 12 leaked on 2027-03-04"')
      .max(500)
      .regex(NO_CONTROL_CHARS, 'must not contain control characters')
      .describe('Why (kept in the audit trail)'),
    receivedFrom: instant.optional(),
    receivedTo: instant.optional(),
    apiKey: z.number().int().positive().optional().describe('Only answers stored through this API key id (see `splitballot keys list`)'),
    dryRun: z.boolean().default(true).describe('true (default): count only, change nothing; false: apply'),
  })
  .refine((b) => b.receivedFrom !== undefined || b.receivedTo !== undefined || b.apiKey !== undefined, {
    message: 'give at least one of receivedFrom, receivedTo and apiKey (a clean-up never takes every answer)',
    path: ['apiKey'],
  })
  .refine((b) => b.receivedFrom === undefined || b.receivedTo === undefined || Date.parse(b.receivedFrom) <= Date.parse(b.receivedTo), {
    message: 'must not be before receivedFrom',
    path: ['receivedTo'],
  });

export const CleanUpResultSchema = z.object({
  action: z.enum(['exclude', 'erase']),
  dryRun: z.boolean(),
  matched: z.number().int().describe('Answers matching the window and key'),
  changed: z.number().int().describe('Answers excluded or erased (would be, in a dry run); already excluded ones are not counted for exclude'),
  dataVersion: z.number().int().describe("The experiment's dataVersion after the clean-up (moved once when anything changed)"),
});
