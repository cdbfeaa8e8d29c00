/**
 * Survey weights in an experiment's definition: the policy (`weights`: "none" | "optional" | "required") and the
 * largest weight accepted (`maxWeight`, default 1e6), kept in the definition's options, and the form/JSON field that
 * carries a response's weight. One place that reads them, for validation, replies and comparisons.
 */
import { z } from 'zod';

/** The response field (JSON, form, batch item, CSV column) that carries the survey weight. */
export const WEIGHT_FIELD = 'weight';

/** Largest weight accepted when the definition does not say. */
export const DEFAULT_MAX_WEIGHT = 1e6;

export const WeightsPolicySchema = z
  .enum(['none', 'optional', 'required'])
  .describe(
    'Survey weights: "none" (default: a response carrying a weight is refused), "optional" (a response may carry one) or ' +
      '"required" (every response must). Weights come from the survey design (inverse selection probabilities, calibration), ' +
      'never from the results.',
  );

export const MaxWeightSchema = z
  .number()
  .gt(0)
  .max(1e15)
  .describe(`Largest weight accepted (default ${DEFAULT_MAX_WEIGHT}); a larger one is refused at ingest`);

export interface WeightsDefinition {
  weights: 'none' | 'optional' | 'required';
  maxWeight: number;
}

/** The weights policy of a definition's options (absent: "none" with the default limit). */
export function weightsOf(options: Record<string, unknown>): WeightsDefinition {
  const w = options.weights;
  const weights = w === 'optional' || w === 'required' ? w : 'none';
  const m = options.maxWeight;
  return { weights, maxWeight: typeof m === 'number' && m > 0 ? m : DEFAULT_MAX_WEIGHT };
}
