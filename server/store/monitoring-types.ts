/**
 * Repository interfaces for interim monitoring (recorded group-sequential looks, the history of the anytime-valid
 * p) and for balanced, sticky assignment of respondents to conditions. No SQLite types here (see types.ts).
 *
 * Pairs: a look sequence and an anytime history belong to an unordered pair of conditions. Callers pass the
 * pair in the order they compare (a, b); implementations may store it in any order but must return signed
 * quantities (observed z, interval bounds) for a − b as asked.
 */

export type SpendingName = 'obrien-fleming' | 'pocock';

export interface LookRecord {
  number: number;
  /** Condition keys in the order the caller asked for (a, b). */
  conditionKeys: [number, number];
  measureKey: number;
  recordedAt: string;
  dataVersion: number;
  fraction: number;
  nA: number;
  nB: number;
  plannedPerCondition: number;
  spending: SpendingName;
  alpha: number;
  cumulativeAlpha: number;
  alphaSpent: number;
  boundaryZ: number | null;
  /** Welch t for a − b and its degrees of freedom. */
  welchT: number;
  welchDf: number;
  /** Normal score of the Welch t (welchToZ), for a − b. */
  observedZ: number;
}

export type NewLook = Omit<LookRecord, 'number'>;

export type RecordLookOutcome =
  | { kind: 'recorded'; look: LookRecord }
  /** Another look of the same sequence was stored since the caller read `expectedPrevious` looks. */
  | { kind: 'raced'; looks: number };

/** One answer of one measure in arrival order. */
export interface ArrivalValues {
  /** 0 for condition a, 1 for condition b (parallel to values). */
  group: Uint8Array;
  values: Float64Array;
  dataVersion: number;
}

export interface AnytimePoint {
  dataVersion: number;
  nA: number;
  nB: number;
  p: number;
  lower: number;
  upper: number;
}

export interface AnytimeHistoryKey {
  experimentKey: number;
  measureKey: number;
  conditionKeys: [number, number];
  alpha: number;
  targetPerCondition: number;
}

export interface LookRepository {
  /** Recorded looks of (measure, pair) in look order, signed for a − b as given. */
  list(experimentKey: number, measureKey: number, conditionKeys: [number, number]): Promise<LookRecord[]>;
  /** Every recorded look of the experiment (all measures and pairs), in recording order; keys as stored. */
  listAll(experimentKey: number): Promise<LookRecord[]>;
  /**
   * Store a look as number `expectedPrevious + 1` of its sequence, in one write transaction that first checks
   * that the sequence still has exactly `expectedPrevious` looks.
   */
  record(experimentKey: number, look: NewLook, expectedPrevious: number, apiKeyId: number | null): Promise<RecordLookOutcome>;
  /** How many looks the experiment has (all sequences): part of a comparison cache key. */
  count(experimentKey: number): Promise<number>;
  /**
   * One measure's values for two conditions, in arrival order (the order responses were stored), excluded
   * responses left out, with the dataVersion, read in one transaction. O(n log n) in SQLite (sort by response).
   */
  getArrivalValues(measureKey: number, conditionKeys: [number, number]): Promise<ArrivalValues>;
  /** Insert one point unless one exists for the same key and dataVersion (cheap; INSERT OR IGNORE). */
  recordAnytime(key: AnytimeHistoryKey, point: AnytimePoint, recordedAt: string): Promise<void>;
  /**
   * Running minimum of p and running intersection of the intervals over the recorded points of this key with
   * min(nA, nB) ≥ minPerCondition; signed for a − b as given. null when there is no such point.
   */
  runningAnytime(
    key: AnytimeHistoryKey,
    minPerCondition: number,
  ): Promise<{ p: number; lower: number; upper: number; points: number; firstDataVersion: number; lastDataVersion: number } | null>;
}

export interface AssignmentPlan {
  /** The block template: condition keys repeated by their integer weights × multiplier, sorted. */
  template: number[];
  /** Returns a uniformly random permutation of the given array (a new array). Called inside the transaction. */
  shuffle: (slots: number[]) => number[];
}

export type AssignOutcome =
  | { kind: 'assigned'; conditionKey: number; created: boolean }
  | { kind: 'closed' }
  | { kind: 'not-found' };

export interface AssignmentCount {
  conditionKey: number;
  /** Respondents assigned to this condition. */
  assigned: number;
  /** Of those, how many have at least one stored response in this experiment (excluded ones included). */
  answered: number;
  /** Of those, how many have a stored response in a different condition than the one assigned. */
  answeredOtherCondition: number;
}

export interface AssignmentRepository {
  /**
   * Sticky, balanced assignment in ONE synchronous write transaction: a closed experiment refuses every call
   * (also for respondents assigned before); an existing assignment of the respondent is returned as it is; otherwise the next slot of the current permuted block is taken (a new block is drawn
   * with plan.shuffle when the current one is used up or was drawn from another template) and the position
   * advanced.
   */
  assign(experimentKey: number, respondent: string, plan: AssignmentPlan, now: string, apiKeyId: number | null): Promise<AssignOutcome>;
  /** Per condition key (only conditions with assignments). */
  summary(experimentKey: number): Promise<AssignmentCount[]>;
  /** Responses whose respondent was never assigned (or that carry no respondent), per condition key. */
  unassignedResponses(experimentKey: number): Promise<{ conditionKey: number; responses: number }[]>;
  /** Assignments in order with their block numbers (for checks and tests; never exposed by the API). */
  listWithBlocks(experimentKey: number): Promise<{ conditionKey: number; blockNumber: number }[]>;
}
