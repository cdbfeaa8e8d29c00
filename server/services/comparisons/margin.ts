/**
 * Equivalence margins: where a measure's margin is kept (the experiment's options, `equivalenceMargins`, keyed by
 * measure id — no table change) and which margin a request uses (`?margin=` when given, else the declared one, else none).
 */
import { ProblemError } from '../../errors.js';
import type { ExperimentRecord, MeasureRecord } from '../../store/types.js';
import { marginProblem } from '../../schemas/equivalence.js';

/** The key of the experiment options that holds the margins by measure id. */
export const MARGINS_OPTION = 'equivalenceMargins';

/** The margins declared on an experiment, by measure id. */
export function declaredMargins(experiment: ExperimentRecord): Record<string, number> {
  const m = experiment.options[MARGINS_OPTION];
  return m && typeof m === 'object' ? (m as Record<string, number>) : {};
}

/** The margin declared for a measure, or null. */
export function declaredMargin(experiment: ExperimentRecord, measure: MeasureRecord): number | null {
  const m = declaredMargins(experiment)[measure.id];
  return typeof m === 'number' ? m : null;
}

/** The margin a request uses: the `?margin=` override (checked; 422 when unusable), else the declared margin, else null. */
export function requestMargin(experiment: ExperimentRecord, measure: MeasureRecord, override: number | undefined): number | null {
  if (override === undefined) return declaredMargin(experiment, measure);
  const problem = marginProblem(override, measure);
  if (problem) {
    throw new ProblemError('validation-failed', `The margin ${problem}.`, {
      errors: [{ path: 'margin', message: problem, value: override }],
    });
  }
  return override;
}
