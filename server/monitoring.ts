/**
 * Placeholder for the monitoring block of a comparison (interim-monitoring issue): computeMonitoring()
 * returns null until that work lands. Signature is the contract the comparison service calls.
 */
import type { ExperimentRecord, Store } from './db/types.js';

export interface MonitoringInput {
  store: Store;
  experiment: ExperimentRecord;
  measureKey: number;
  conditionKeys: [number, number];
  /** Moments of the two groups as compared (after exclusions). */
  a: { n: number; mean: number | null; variance: number | null };
  b: { n: number; mean: number | null; variance: number | null };
  /** Welch t and df of the comparison, for group-sequential looks. */
  welch: { t: number | null; df: number | null };
  alpha: number;
}

export type Monitoring = Record<string, unknown>;

export async function computeMonitoring(_input: MonitoringInput): Promise<Monitoring | null> {
  return null;
}
