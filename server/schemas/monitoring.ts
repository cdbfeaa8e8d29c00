/**
 * Schemas of interim monitoring (the monitoring block of a comparison, looks, trajectory), sample-size planning
 * and balanced assignment.
 */
import { z } from 'zod';
import { NO_CONTROL_CHARS, PathId } from './common.js';


// ---------------------------------------------------------------------------------------------------------
// Monitoring block (part of every comparison)
// ---------------------------------------------------------------------------------------------------------

export const MonitoringIntervalSchema = z.object({
  level: z.number(),
  lower: z.number().nullable(),
  upper: z.number().nullable(),
  reason: z.string().optional(),
});

export const LookViewSchema = z
  .object({
    number: z.number().int().describe('1, 2, … within this measure and pair'),
    recordedAt: z.string(),
    dataVersion: z.number().int(),
    fraction: z.number().describe('Information fraction: effective answers per condition / planned, capped at 1'),
    nA: z.number().int(),
    nB: z.number().int(),
    cumulativeAlpha: z.number().describe('Two-sided alpha spent up to and including this look'),
    alphaSpent: z.number().describe('Two-sided alpha spent at this look'),
    boundaryZ: z.number().nullable().describe('Critical |z|; null when the look spends no alpha'),
    nominalP: z.number().nullable().describe('Two-sided nominal p matching the boundary'),
    observedZ: z.number().describe('Normal score of the Welch t at the look (a − b)'),
    crossed: z.boolean(),
    direction: z.enum(['a', 'b']).nullable().describe('Which condition had the larger mean, when crossed'),
  })
  .meta({ id: 'InterimLookSummary' });

export const MonitoringSchema = z
  .object({
    anytimeValid: z
      .object({
        method: z.string(),
        p: z.number().nullable().describe('Anytime-valid p now (two-sided; H0: equal means)'),
        ci: MonitoringIntervalSchema.describe('Anytime-valid interval (confidence sequence) for mean a − mean b now'),
        estimate: z.number().nullable(),
        mixing: z.number().describe('Mixing parameter ρ of the normal mixture (standardised scale)'),
        targetPerCondition: z.number().describe('Answers per condition where the sequence is tightest (planned size, or 500)'),
        running: z
          .object({
            p: z.number().nullable().describe('Running minimum of the anytime-valid p over the recorded history: read this one'),
            ci: MonitoringIntervalSchema.describe('Running intersection of the anytime-valid interval (confidence sequence)'),
            points: z.number().int(),
            minPerCondition: z.number().int().describe('Points with fewer answers in a condition are left out'),
            reason: z.string().optional(),
          })
          .describe('Running values over the recorded history: valid at any time, never move back'),
        reason: z.string().optional(),
      })
      .nullable(),
    groupSequential: z
      .object({
        method: z.string(),
        spending: z.enum(['obrien-fleming', 'pocock']).nullable(),
        alpha: z.number(),
        plannedPerCondition: z.number().int().nullable(),
        currentFraction: z.number().nullable().describe('Fraction the next look would be recorded at'),
        looks: z.array(LookViewSchema),
        firstCrossing: z.number().int().nullable().describe('Number of the first crossed look (stop there), or null'),
        reason: z.string().optional(),
      })
      .nullable()
      .describe('Recorded group-sequential looks; null when the experiment declares no monitoring and has none'),
    caveat: z.string(),
  })
  .meta({ id: 'Monitoring' });

// ---------------------------------------------------------------------------------------------------------
// Looks
// ---------------------------------------------------------------------------------------------------------

export const MeasureParams = z.object({ id: PathId, measure: PathId });

export const LookInputSchema = z
  .strictObject({
    measure: z.string().min(1).max(200).describe('Measure id, e.g. satisfaction'),
    a: z.string().min(1).max(200).optional().describe('First condition (default: the first in the definition)'),
    b: z.string().min(1).max(200).optional().describe('Second condition (default: the second in the definition)'),
  })
  .meta({ id: 'InterimLookRequest', example: { measure: 'satisfaction' } });

export const LookSchema = LookViewSchema.extend({
  measure: z.string(),
  a: z.string(),
  b: z.string(),
  plannedPerCondition: z.number().int(),
  spending: z.enum(['obrien-fleming', 'pocock']),
  alpha: z.number(),
  welch: z.object({ t: z.number(), df: z.number() }),
  final: z.boolean().describe('True for the look at the planned size (fraction 1), which spends all remaining alpha'),
  message: z.string().describe('What the look means for the study, in one sentence'),
}).meta({ id: 'InterimLook' });

export const LookListSchema = z
  .object({
    experiment: z.string(),
    spending: z.enum(['obrien-fleming', 'pocock']).nullable(),
    plannedPerCondition: z.number().int().nullable(),
    looks: z.array(LookSchema.omit({ message: true })),
  })
  .meta({ id: 'InterimLookList' });

export const LookListQuery = z.strictObject({
  measure: PathId.optional().describe('Only looks of this measure'),
});

export const PairQuery = z.strictObject({
  a: z.string().min(1).max(200).optional().describe('First condition (default: the first in the definition)'),
  b: z.string().min(1).max(200).optional().describe('Second condition (default: the second in the definition)'),
});

export const TrajectorySchema = z
  .object({
    experiment: z.string(),
    measure: z.string(),
    a: z.string(),
    b: z.string(),
    dataVersion: z.number().int(),
    alpha: z.number(),
    method: z.string(),
    mixing: z.number(),
    targetPerCondition: z.number(),
    plannedPerCondition: z.number().int().nullable().describe('Planned answers per condition, or null when none is declared'),
    floorPerCondition: z.number().int().describe('Answers per condition before a point counts as evidence'),
    points: z.array(
      z.object({
        n: z.number().int().describe('Answers so far (both conditions)'),
        nA: z.number().int(),
        nB: z.number().int(),
        provisional: z.boolean().describe('A condition has fewer answers than floorPerCondition: read as provisional, not as evidence'),
        p: z.number().nullable().describe('Anytime-valid p at that moment'),
        lower: z.number().nullable().describe('Anytime-valid interval (confidence sequence) for a − b at that moment: lower bound'),
        upper: z.number().nullable(),
        estimate: z.number().nullable().describe('Mean a − mean b at that moment'),
        runningP: z.number().nullable().describe('Minimum of the anytime-valid p from the floor to this point; null before the floor'),
        runningLower: z
          .number()
          .nullable()
          .describe('Running (never-widening) anytime-valid interval: intersection from the floor to this point; null before the floor'),
        runningUpper: z.number().nullable(),
      }),
    ),
  })
  .meta({ id: 'Trajectory' });

// ---------------------------------------------------------------------------------------------------------
// Planning
// ---------------------------------------------------------------------------------------------------------

const given = (x: unknown): boolean => x !== undefined && x !== null;

export const PlanningInputSchema = z
  .strictObject({
    test: z.enum(['welch', 'rank-sum']).describe('welch: noncentral t; rank-sum: Noether (1987)'),
    difference: z.number().nullable().optional().describe('Expected mean a − mean b, with sd'),
    sd: z.number().gt(0, 'must be greater than 0').nullable().optional().describe('Expected standard deviation (common to both conditions), with difference'),
    effectSize: z.number().nullable().optional().describe("Expected Cohen's d, instead of difference and sd"),
    probabilityOfSuperiority: z
      .number()
      .gt(0, 'must be strictly between 0 and 1')
      .lt(1, 'must be strictly between 0 and 1')
      .nullable()
      .optional()
      .describe('rank-sum only: expected P(A > B) + ½ P(A = B), instead of a mean shift'),
    alpha: z.number().gt(0, 'must be greater than 0').max(0.5, 'must be at most 0.5').default(0.05),
    power: z.number().gt(0, 'must be strictly between 0 and 1').lt(1, 'must be strictly between 0 and 1').default(0.8),
    ratio: z.number().min(1e-4, 'must be at least 0.0001').max(1e4, 'must be at most 10000').default(1).describe('n_b / n_a'),
    alternative: z.enum(['two-sided', 'less', 'greater']).default('two-sided'),
  })
  .superRefine((v, ctx) => {
    const shift = given(v.difference) || given(v.sd);
    const d = given(v.effectSize);
    const pSup = given(v.probabilityOfSuperiority);
    const count = Number(shift) + Number(d) + Number(pSup);
    if (count === 0) {
      ctx.addIssue({ code: 'custom', path: [], message: 'give the expected effect: difference and sd, or effectSize (rank-sum also: probabilityOfSuperiority)' });
      return;
    }
    if (count > 1) {
      const paths = [shift ? (given(v.difference) ? 'difference' : 'sd') : null, d ? 'effectSize' : null, pSup ? 'probabilityOfSuperiority' : null].filter(
        (x): x is string => x !== null,
      );
      ctx.addIssue({ code: 'custom', path: [paths[1]], message: `cannot be combined with ${paths[0]}: give exactly one way of stating the effect` });
      return;
    }
    if (shift && !given(v.difference)) ctx.addIssue({ code: 'custom', path: ['difference'], message: 'is needed together with sd' });
    if (shift && !given(v.sd)) ctx.addIssue({ code: 'custom', path: ['sd'], message: 'is needed together with difference' });
    if (pSup && v.test !== 'rank-sum') ctx.addIssue({ code: 'custom', path: ['probabilityOfSuperiority'], message: 'is used only by the rank-sum plan' });
    if (v.power <= v.alpha) ctx.addIssue({ code: 'custom', path: ['power'], message: `must be greater than alpha (${v.alpha}): a test rejects with probability alpha even without an effect` });
    const signed = shift ? (given(v.difference) ? (v.difference as number) : null) : d ? (v.effectSize as number) : pSup ? (v.probabilityOfSuperiority as number) - 0.5 : null;
    const path = shift ? 'difference' : d ? 'effectSize' : 'probabilityOfSuperiority';
    if (signed === 0) ctx.addIssue({ code: 'custom', path: [path], message: 'is no effect at all: no sample size gives more power than alpha' });
    else if (signed !== null && ((v.alternative === 'greater' && signed < 0) || (v.alternative === 'less' && signed > 0))) {
      ctx.addIssue({ code: 'custom', path: [path], message: `points the other way from the one-sided alternative "${v.alternative}"` });
    }
  })
  .meta({
    id: 'SampleSizeRequest',
    example: { test: 'welch', difference: 0.5, sd: 2.2, alpha: 0.05, power: 0.8, ratio: 1, alternative: 'two-sided' },
  });

export const PlanningResultSchema = z
  .object({
    test: z.enum(['welch', 'rank-sum']),
    alternative: z.enum(['two-sided', 'less', 'greater']),
    alpha: z.number(),
    power: z.number().describe('Requested power'),
    ratio: z.number(),
    perCondition: z.tuple([z.number().int(), z.number().int()]).describe('[n_a, n_b] answers per condition'),
    total: z.number().int(),
    achievedPower: z.number().describe('Power at exactly these whole numbers (≥ the requested power)'),
    method: z.string(),
    effectSize: z.number().describe("Cohen's d used (rank-sum given P(A > B): its normal-shift equivalent)"),
    probabilityOfSuperiority: z.number().nullable(),
    plannedPerCondition: z.number().int().describe('The value to put in the experiment definition (the larger of n_a, n_b)'),
    assumptions: z.string(),
  })
  .meta({ id: 'SampleSizePlan' });

// ---------------------------------------------------------------------------------------------------------
// Assignment
// ---------------------------------------------------------------------------------------------------------

export const AssignmentInputSchema = z
  .strictObject({
    respondent: z
      .string()
      .min(1, 'must not be empty')
      .max(256, 'must be at most 256 characters')
      .regex(NO_CONTROL_CHARS, 'must not contain control characters')
      .describe('Opaque respondent id; the same id always gets the same condition. Send it again with the response (respondent).'),
  })
  .meta({ id: 'AssignmentRequest', example: { respondent: 'r-7f3a9c' } });

export const AssignmentSchema = z
  .object({
    condition: z.string().describe('Condition id to show this respondent'),
    respondent: z.string(),
    new: z.boolean().describe('False when the respondent already had this assignment'),
  })
  .meta({ id: 'Assignment' });

export const AssignmentSummarySchema = z
  .object({
    experiment: z.string(),
    allocation: z
      .object({
        weights: z.record(z.string(), z.number().int()).describe('Whole-number weights per condition'),
        blockSize: z.number().int().describe('Respondents per permuted block'),
      })
      .nullable(),
    reason: z.string().optional(),
    byCondition: z.array(
      z.object({
        condition: z.string(),
        assigned: z.number().int(),
        answered: z.number().int().describe('Assigned respondents with at least one stored response (excluded ones included)'),
        notAnswered: z.number().int().describe('Assigned but never answered: drop-out'),
        answeredOtherCondition: z.number().int().describe('Assigned here but answered in another condition'),
        responsesWithoutAssignment: z.number().int().describe('Stored responses in this condition whose respondent was never assigned'),
      }),
    ),
    totals: z.object({ assigned: z.number().int(), answered: z.number().int(), notAnswered: z.number().int() }),
  })
  .meta({ id: 'AssignmentSummary' });
