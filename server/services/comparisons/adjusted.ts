/**
 * The `adjusted` block of a comparison: the difference a − b adjusted for covariates (measures declared
 * `role: "covariate"`, asked before the split) by Lin's (2013) fully interacted regression with the HC2 standard
 * error, beside the unadjusted difference on the same rows (stats/covariate-adjustment.ts).
 *
 * Resolving `?covariates=a,b`: each name must be a measure of the experiment declared as a covariate, named once, and
 * not the outcome itself; anything else is a 422 listing every bad name. Reading: the store's per-respondent rows
 * (responses of the two conditions that answered the outcome, with their covariate answers; complete cases are
 * used, missing covariates counted). Cost O(n·k) to read and O(n·p²) to fit, p = 2 + 2k; the comparison service
 * caches the result by dataVersion like a comparison, and fits it in its worker pool when the rows are many (the
 * runner; `adjustedFromRows` is pure).
 */
import { covariateAdjusted } from '../../../stats/covariate-adjustment.js';
import { ProblemError } from '../../errors.js';
import type { FieldError } from '../../schemas/common.js';
import type { AdjustedBlock } from '../../schemas/weighted.js';
import type { AdjustmentRows, ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';
import type { ComparisonTarget } from '../targets.js';

/** At most this many covariates in one request (p = 2 + 2k parameters). */
export const MAX_COVARIATES = 20;

/** The covariates an experiment declares, in definition order. */
export function covariatesOf(experiment: ExperimentRecord): MeasureRecord[] {
  return experiment.measures.filter((m) => m.role === 'covariate');
}

/** Parse `?covariates=` into covariate measures (422 validation-failed naming every bad entry). */
export function resolveCovariates(experiment: ExperimentRecord, outcome: MeasureRecord, list: string): MeasureRecord[] {
  const names = list.split(',').map((s) => s.trim());
  const errors: FieldError[] = [];
  const out: MeasureRecord[] = [];
  const declared = covariatesOf(experiment).map((m) => m.id);
  const known = declared.length > 0 ? `its covariates are ${declared.join(', ')}` : 'it declares no covariates';
  if (names.length > MAX_COVARIATES) errors.push({ path: 'covariates', message: `names ${names.length} covariates; at most ${MAX_COVARIATES} are allowed` });
  for (const name of names) {
    const m = experiment.measures.find((x) => x.id === name);
    if (name === '') errors.push({ path: 'covariates', message: 'has an empty name (a list separated by commas is expected)' });
    else if (!m) errors.push({ path: 'covariates', message: `"${name}" is not a measure of experiment ${experiment.id} (${known})`, value: name });
    else if (m.role !== 'covariate') errors.push({ path: 'covariates', message: `"${name}" is not declared as a covariate (${known})`, value: name });
    else if (m.key === outcome.key) errors.push({ path: 'covariates', message: `"${name}" is the measure being compared`, value: name });
    else if (out.includes(m)) errors.push({ path: 'covariates', message: `"${name}" is named twice`, value: name });
    else out.push(m);
  }
  if (errors.length > 0) throw new ProblemError('validation-failed', 'The query string names covariates that cannot be used.', { errors });
  return out;
}

/** The fit of an adjusted block: pure, so it runs in a worker thread as well as in-thread. */
export interface AdjustedInput {
  rows: AdjustmentRows;
  covariateNames: string[];
  alternative: 'two-sided' | 'less' | 'greater';
  confidenceLevel: number;
}

/** Where the fit runs (the service passes its worker pool; in-thread by default). */
export type AdjustedRunner = (input: AdjustedInput) => Promise<AdjustedBlock>;

/** The adjusted block from the rows: Lin's fit (stats/covariate-adjustment.ts). O(n·p²). */
export function adjustedFromRows(input: AdjustedInput): AdjustedBlock {
  const { rows, covariateNames: names } = input;
  const result = covariateAdjusted(
    { outcome: rows.outcome, inA: rows.inA, covariates: rows.covariates, covariateNames: names },
    { alternative: input.alternative, confidenceLevel: input.confidenceLevel },
  );
  return { covariates: names, ...result } as AdjustedBlock;
}

/** Lin's adjusted comparison for a target, with the dataVersion of the rows it used. O(n·k) to read, O(n·p²) to fit. */
export async function computeAdjusted(
  store: Store,
  t: ComparisonTarget,
  covariates: MeasureRecord[],
  options: { alternative: 'two-sided' | 'less' | 'greater'; confidenceLevel: number; includeExcluded: boolean },
  run: AdjustedRunner = async (input) => adjustedFromRows(input),
): Promise<{ dataVersion: number; block: AdjustedBlock }> {
  const rows = await store.responses.getAdjustmentRows(
    t.measure.key,
    covariates.map((c) => c.key),
    [t.a.key, t.b.key],
    options.includeExcluded,
  );
  const input: AdjustedInput = { rows, covariateNames: covariates.map((c) => c.id), alternative: options.alternative, confidenceLevel: options.confidenceLevel };
  return { dataVersion: rows.dataVersion, block: await run(input) };
}
