/**
 * SQLite repositories for interim monitoring (recorded looks, the history of the anytime-valid p) and for
 * balanced, sticky assignment (tables in migrations/sqlite/0003_looks_assignments.sql).
 *
 * Pairs are stored in key order (lo < hi) with signed quantities for lo − hi; the readers flip them when the
 * caller's (a, b) is (hi, lo).
 *
 * Assignment is ONE synchronous write transaction (BEGIN IMMEDIATE): existing assignment? → else read the block
 * state, draw a new block when it is used up (or the template changed), take the next slot, advance, insert.
 * Because the write lock is taken at BEGIN, concurrent requests (in this process or another) are serialised and
 * a block is never broken.
 */
import type { SqliteDatabase } from './open.js';
import type {
  AnytimeHistoryKey,
  AnytimePoint,
  ArrivalValues,
  AssignmentCount,
  AssignmentPlan,
  AssignmentRepository,
  AssignOutcome,
  LookRecord,
  LookRepository,
  NewLook,
  RecordLookOutcome,
} from '../monitoring-types.js';

import { LOOK_COLUMNS, lookFromRow, orderPair, type LookRow } from '../look-rows.js';

export class SqliteLookRepository implements LookRepository {
  private readonly listStmt;
  private readonly listAllStmt;
  private readonly countSeq;
  private readonly countAll;
  private readonly insertLook;
  private readonly recordTx;
  private readonly arrivalStmt;
  private readonly versionOfMeasure;
  private readonly insertAnytime;
  private readonly runningStmt;

  constructor(readonly db: SqliteDatabase) {
    const cols = LOOK_COLUMNS;
    this.listStmt = db.prepare<[number, number, number, number], LookRow>(
      `SELECT ${cols} FROM interim_looks WHERE experiment_id = ? AND measure_id = ? AND condition_lo = ? AND condition_hi = ? ORDER BY number`,
    );
    this.listAllStmt = db.prepare<[number], LookRow>(`SELECT ${cols} FROM interim_looks WHERE experiment_id = ? ORDER BY id`);
    this.countSeq = db
      .prepare<[number, number, number, number], number>(
        `SELECT count(*) FROM interim_looks WHERE experiment_id = ? AND measure_id = ? AND condition_lo = ? AND condition_hi = ?`,
      )
      .pluck();
    this.countAll = db.prepare<[number], number>(`SELECT count(*) FROM interim_looks WHERE experiment_id = ?`).pluck();
    this.insertLook = db.prepare(
      `INSERT INTO interim_looks (experiment_id, measure_id, condition_lo, condition_hi, number, recorded_at, data_version, fraction,
         n_lo, n_hi, planned_per_condition, spending, alpha, cumulative_alpha, alpha_spent, boundary_z, welch_t, welch_df, observed_z, api_key_id)
       VALUES (@experiment_id, @measure_id, @condition_lo, @condition_hi, @number, @recorded_at, @data_version, @fraction,
         @n_lo, @n_hi, @planned_per_condition, @spending, @alpha, @cumulative_alpha, @alpha_spent, @boundary_z, @welch_t, @welch_df, @observed_z, @api_key_id)`,
    );
    this.recordTx = db.transaction((experimentKey: number, look: NewLook, expectedPrevious: number, apiKeyId: number | null): RecordLookOutcome => {
      const { lo, hi, flipped } = orderPair(look.conditionKeys);
      const existing = this.countSeq.get(experimentKey, look.measureKey, lo, hi) as number;
      if (existing !== expectedPrevious) return { kind: 'raced', looks: existing };
      const s = flipped ? -1 : 1;
      const row: LookRow & { experiment_id: number; api_key_id: number | null } = {
        experiment_id: experimentKey,
        number: existing + 1,
        measure_id: look.measureKey,
        condition_lo: lo,
        condition_hi: hi,
        recorded_at: look.recordedAt,
        data_version: look.dataVersion,
        fraction: look.fraction,
        n_lo: flipped ? look.nB : look.nA,
        n_hi: flipped ? look.nA : look.nB,
        planned_per_condition: look.plannedPerCondition,
        spending: look.spending,
        alpha: look.alpha,
        cumulative_alpha: look.cumulativeAlpha,
        alpha_spent: look.alphaSpent,
        boundary_z: look.boundaryZ,
        welch_t: s * look.welchT,
        welch_df: look.welchDf,
        observed_z: s * look.observedZ,
        api_key_id: apiKeyId,
      };
      this.insertLook.run(row);
      return { kind: 'recorded', look: { ...look, number: existing + 1 } };
    });
    this.arrivalStmt = db
      .prepare<[number, number, number], [number, number]>(
        `SELECT condition_id, value FROM response_values
         WHERE measure_id = ? AND excluded = 0 AND condition_id IN (?, ?)
         ORDER BY response_id`,
      )
      .raw();
    this.versionOfMeasure = db
      .prepare<[number], number>(`SELECT e.data_version FROM experiments e JOIN measures m ON m.experiment_id = e.id WHERE m.id = ?`)
      .pluck();
    this.insertAnytime = db.prepare(
      `INSERT OR IGNORE INTO anytime_history (experiment_id, measure_id, condition_lo, condition_hi, alpha, target_per_condition, data_version,
         recorded_at, n_lo, n_hi, p, lower, upper)
       VALUES (@experiment_id, @measure_id, @condition_lo, @condition_hi, @alpha, @target, @data_version, @recorded_at, @n_lo, @n_hi, @p, @lower, @upper)`,
    );
    this.runningStmt = db.prepare<
      [number, number, number, number, number, number, number, number],
      { p: number | null; lower: number | null; upper: number | null; points: number; first: number | null; last: number | null }
    >(
      `SELECT min(p) AS p, max(lower) AS lower, min(upper) AS upper, count(*) AS points, min(data_version) AS first, max(data_version) AS last
       FROM anytime_history
       WHERE experiment_id = ? AND measure_id = ? AND condition_lo = ? AND condition_hi = ? AND alpha = ? AND target_per_condition = ?
         AND n_lo >= ? AND n_hi >= ?`,
    );
  }

  async list(experimentKey: number, measureKey: number, conditionKeys: [number, number]): Promise<LookRecord[]> {
    const { lo, hi, flipped } = orderPair(conditionKeys);
    return this.listStmt.all(experimentKey, measureKey, lo, hi).map((r) => lookFromRow(r, flipped));
  }

  async listAll(experimentKey: number): Promise<LookRecord[]> {
    return this.listAllStmt.all(experimentKey).map((r) => lookFromRow(r, false));
  }

  async record(experimentKey: number, look: NewLook, expectedPrevious: number, apiKeyId: number | null): Promise<RecordLookOutcome> {
    return this.recordTx.immediate(experimentKey, look, expectedPrevious, apiKeyId);
  }

  async count(experimentKey: number): Promise<number> {
    return this.countAll.get(experimentKey) as number;
  }

  async getArrivalValues(measureKey: number, conditionKeys: [number, number]): Promise<ArrivalValues> {
    return this.readArrivalValues(measureKey, conditionKeys);
  }

  /**
   * getArrivalValues, synchronously (also what a worker thread runs on its own connection): the rows are streamed
   * into typed arrays that grow by doubling, so no array of row objects is ever built (≈ 9 bytes per answer).
   */
  readArrivalValues(measureKey: number, conditionKeys: [number, number]): ArrivalValues {
    return this.db.transaction((): ArrivalValues => {
      const dataVersion = this.versionOfMeasure.get(measureKey);
      if (dataVersion === undefined) throw new RangeError(`measure key ${measureKey} does not exist`);
      const [a, b] = conditionKeys;
      let group = new Uint8Array(1024);
      let values = new Float64Array(1024);
      let n = 0;
      for (const row of this.arrivalStmt.iterate(measureKey, a, b)) {
        if (n === values.length) {
          const g = new Uint8Array(n * 2);
          g.set(group);
          group = g;
          const v = new Float64Array(n * 2);
          v.set(values);
          values = v;
        }
        group[n] = row[0] === a ? 0 : 1;
        values[n] = row[1];
        n++;
      }
      return { group: group.slice(0, n), values: values.slice(0, n), dataVersion };
    })();
  }

  async recordAnytime(key: AnytimeHistoryKey, point: AnytimePoint, recordedAt: string): Promise<void> {
    const { lo, hi, flipped } = orderPair(key.conditionKeys);
    this.insertAnytime.run({
      experiment_id: key.experimentKey,
      measure_id: key.measureKey,
      condition_lo: lo,
      condition_hi: hi,
      alpha: key.alpha,
      target: key.targetPerCondition,
      data_version: point.dataVersion,
      recorded_at: recordedAt,
      n_lo: flipped ? point.nB : point.nA,
      n_hi: flipped ? point.nA : point.nB,
      p: point.p,
      lower: flipped ? -point.upper : point.lower,
      upper: flipped ? -point.lower : point.upper,
    });
  }

  async runningAnytime(key: AnytimeHistoryKey, minPerCondition: number) {
    const { lo, hi, flipped } = orderPair(key.conditionKeys);
    const r = this.runningStmt.get(key.experimentKey, key.measureKey, lo, hi, key.alpha, key.targetPerCondition, minPerCondition, minPerCondition);
    if (!r || r.points === 0 || r.p === null || r.lower === null || r.upper === null) return null;
    return {
      p: r.p,
      lower: flipped ? -r.upper : r.lower,
      upper: flipped ? -r.lower : r.upper,
      points: r.points,
      firstDataVersion: r.first as number,
      lastDataVersion: r.last as number,
    };
  }
}

interface StateRow {
  block_number: number;
  template: string;
  block: string;
  position: number;
}

export class SqliteAssignmentRepository implements AssignmentRepository {
  private readonly experimentStatus;
  private readonly existing;
  private readonly stateOf;
  private readonly upsertState;
  private readonly advance;
  private readonly insertAssignment;
  private readonly assignTx;
  private readonly summaryStmt;
  private readonly unassignedStmt;
  private readonly blocksStmt;

  constructor(readonly db: SqliteDatabase) {
    this.experimentStatus = db.prepare<[number], string>(`SELECT status FROM experiments WHERE id = ?`).pluck();
    this.existing = db
      .prepare<[number, string], number>(`SELECT condition_id FROM assignments WHERE experiment_id = ? AND respondent = ?`)
      .pluck();
    this.stateOf = db.prepare<[number], StateRow>(`SELECT block_number, template, block, position FROM assignment_state WHERE experiment_id = ?`);
    this.upsertState = db.prepare<[number, number, string, string]>(
      `INSERT INTO assignment_state (experiment_id, block_number, template, block, position) VALUES (?, ?, ?, ?, 1)
       ON CONFLICT (experiment_id) DO UPDATE SET block_number = excluded.block_number, template = excluded.template,
         block = excluded.block, position = excluded.position`,
    );
    this.advance = db.prepare<[number]>(`UPDATE assignment_state SET position = position + 1 WHERE experiment_id = ?`);
    this.insertAssignment = db.prepare<[number, string, number, number, string, number | null]>(
      `INSERT INTO assignments (experiment_id, respondent, condition_id, block_number, assigned_at, api_key_id) VALUES (?, ?, ?, ?, ?, ?)`,
    );
    this.assignTx = db.transaction(
      (experimentKey: number, respondent: string, plan: AssignmentPlan, now: string, apiKeyId: number | null): AssignOutcome => {
        const status = this.experimentStatus.get(experimentKey);
        if (status === undefined) return { kind: 'not-found' };
        if (status !== 'open') return { kind: 'closed' };
        const before = this.existing.get(experimentKey, respondent);
        if (before !== undefined) return { kind: 'assigned', conditionKey: before, created: false };
        const template = JSON.stringify(plan.template);
        const state = this.stateOf.get(experimentKey);
        let conditionKey: number;
        let blockNumber: number;
        const block: number[] | null = state && state.template === template ? (JSON.parse(state.block) as number[]) : null;
        if (state && block && state.position < block.length) {
          conditionKey = block[state.position];
          blockNumber = state.block_number;
          this.advance.run(experimentKey);
        } else {
          const drawn = plan.shuffle([...plan.template]);
          if (drawn.length !== plan.template.length) throw new Error('shuffle changed the block length');
          blockNumber = (state?.block_number ?? 0) + 1;
          conditionKey = drawn[0];
          this.upsertState.run(experimentKey, blockNumber, template, JSON.stringify(drawn));
        }
        this.insertAssignment.run(experimentKey, respondent, conditionKey, blockNumber, now, apiKeyId);
        return { kind: 'assigned', conditionKey, created: true };
      },
    );
    this.summaryStmt = db.prepare<[number], { condition_id: number; assigned: number; answered: number; elsewhere: number }>(
      `SELECT a.condition_id AS condition_id, count(*) AS assigned,
         coalesce(sum(EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = a.experiment_id AND r.respondent = a.respondent)), 0) AS answered,
         coalesce(sum(EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = a.experiment_id AND r.respondent = a.respondent
                                AND r.condition_id <> a.condition_id)), 0) AS elsewhere
       FROM assignments a WHERE a.experiment_id = ? GROUP BY a.condition_id`,
    );
    this.unassignedStmt = db.prepare<[number, number], { condition_id: number; responses: number }>(
      `SELECT r.condition_id AS condition_id, count(*) AS responses FROM responses r
       WHERE r.experiment_id = ? AND (r.respondent IS NULL OR NOT EXISTS
         (SELECT 1 FROM assignments a WHERE a.experiment_id = ? AND a.respondent = r.respondent))
       GROUP BY r.condition_id`,
    );
    this.blocksStmt = db.prepare<[number], { condition_id: number; block_number: number }>(
      `SELECT condition_id, block_number FROM assignments WHERE experiment_id = ? ORDER BY id`,
    );
  }

  async assign(experimentKey: number, respondent: string, plan: AssignmentPlan, now: string, apiKeyId: number | null): Promise<AssignOutcome> {
    if (plan.template.length === 0) throw new RangeError('the block template is empty');
    return this.assignTx.immediate(experimentKey, respondent, plan, now, apiKeyId);
  }

  async summary(experimentKey: number): Promise<AssignmentCount[]> {
    return this.summaryStmt
      .all(experimentKey)
      .map((r) => ({ conditionKey: r.condition_id, assigned: r.assigned, answered: r.answered, answeredOtherCondition: r.elsewhere }));
  }

  async unassignedResponses(experimentKey: number): Promise<{ conditionKey: number; responses: number }[]> {
    return this.unassignedStmt.all(experimentKey, experimentKey).map((r) => ({ conditionKey: r.condition_id, responses: r.responses }));
  }

  async listWithBlocks(experimentKey: number): Promise<{ conditionKey: number; blockNumber: number }[]> {
    return this.blocksStmt.all(experimentKey).map((r) => ({ conditionKey: r.condition_id, blockNumber: r.block_number }));
  }
}
