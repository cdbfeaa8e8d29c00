/**
 * Schema of the equivalence block (two one-sided tests against a margin m), mirroring stats' `EquivalenceResult`
 * (stats/equivalence.ts) field for field: the Welch TOST, the rank-based TOST and a verdict for each.
 */
import { z } from 'zod';

const num = z.number();
const nullableNum = z.number().nullable();
const reason = z.string().optional().describe('Why a quantity above is null (plain sentence)');
/** An interval at level 1 − 2α (the same fields as the comparison's Interval). */
const TostIntervalSchema = z.object({
  level: num.describe('Confidence level (1 − 2α)'),
  lower: nullableNum,
  upper: nullableNum,
  achievedLevel: nullableNum.optional().describe('Rank route: the level the interval really has (lattice of differences)'),
  reason,
});

export const EquivalenceVerdictSchema = z
  .object({
    code: z.enum(['equivalent', 'trivial', 'different', 'inconclusive']).describe(
      'equivalent: TOST p < α and the ordinary test not significant; trivial: both significant (a difference, but within the margin); ' +
        'different: only the ordinary test significant; inconclusive: neither',
    ),
    words: z.string().describe('The verdict in one plain sentence'),
  })
  .meta({ id: 'EquivalenceVerdict' });

const WelchOneSidedSchema = z.object({ bound: num.describe('−m (lower test) or +m (upper test)'), t: nullableNum, p: nullableNum });

const RankOneSidedSchema = z.object({
  bound: num.describe('−m (lower test) or +m (upper test)'),
  u: nullableNum.describe('U of the shifted a (R\'s W)'),
  z: nullableNum,
  p: nullableNum,
  method: z.enum(['exact', 'normal']),
  continuityCorrection: z.boolean(),
  reason,
});

export const EquivalenceSchema = z
  .object({
    margin: num.describe('The margin m: differences inside (−m, m) count as negligible (item units)'),
    alpha: num.describe('Level of each one-sided test; the intervals are at 1 − 2α'),
    welch: z.object({
      meanDifference: nullableNum.describe('mean(a) − mean(b)'),
      se: nullableNum,
      df: nullableNum.describe('Welch–Satterthwaite df'),
      lower: WelchOneSidedSchema.describe('H0: Δ ≤ −m against Δ > −m'),
      upper: WelchOneSidedSchema.describe('H0: Δ ≥ +m against Δ < +m'),
      p: nullableNum.describe('TOST p = max(lower p, upper p)'),
      ci: TostIntervalSchema.describe('Welch (1 − 2α) interval for a − b: equivalence is shown when it lies inside (−m, m)'),
      ordinaryP: nullableNum.describe("Two-sided Welch p of 'no difference', for the verdict"),
      verdict: EquivalenceVerdictSchema.nullable(),
      reason,
    }),
    rank: z.object({
      lower: RankOneSidedSchema.describe('rank-sum test of a + m against b, alternative "greater"'),
      upper: RankOneSidedSchema.describe('rank-sum test of a − m against b, alternative "less"'),
      p: nullableNum.describe('TOST p = max(lower p, upper p)'),
      estimate: nullableNum.describe('Hodges–Lehmann shift a − b'),
      ci: TostIntervalSchema.describe('Hodges–Lehmann (1 − 2α) interval'),
      ordinaryP: nullableNum.describe('Two-sided rank-sum p of no shift, for the verdict'),
      ordinaryMethod: z.enum(['exact', 'normal']),
      verdict: EquivalenceVerdictSchema.nullable(),
      reason,
    }),
  })
  .meta({
    id: 'Equivalence',
    description:
      'Two one-sided tests (TOST) of |a − b| < m by the mean route (Welch) and the rank route (a location shift; exact under a pure shift model)',
  });

/** `?margin=`: a number here; positive and smaller than the scale's range is checked after the measure is known (422). */
export const MarginQuery = z.coerce
  .number({ message: 'must be a number' })
  .optional()
  .describe("Equivalence margin in the item's units (overrides the measure's equivalenceMargin): positive, smaller than max − min");

/** The one rule of a margin: a positive number smaller than the measure's range max − min. Why not, or null when usable. */
export function marginProblem(margin: number, measure: { min: number; max: number }): string | null {
  const range = measure.max - measure.min;
  if (!Number.isFinite(margin) || !(margin > 0)) return `must be a positive number (the smallest difference that matters, in the item's units); got ${String(margin)}`;
  if (!(margin < range)) return `must be smaller than the scale's range (${measure.max} − ${measure.min} = ${range}); got ${margin}`;
  return null;
}

export type EquivalenceBody = z.infer<typeof EquivalenceSchema>;
