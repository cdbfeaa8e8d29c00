/**
 * Interim looks, the anytime-valid history and balanced assignment (PostgreSQL; tables of
 * migrations/postgres/0003_looks_assignments.sql).
 *
 * Looks: record() locks the experiment's row (the same lock ingest takes), counts the looks of the sequence and
 * inserts number count + 1 only when the count is what the caller computed its boundary from; otherwise "raced".
 * So looks of one experiment are serialised on every node, and a boundary is always computed from the looks
 * stored before it. The UNIQUE (…, number) constraint backs this up.
 *
 * Assignment: one write transaction under a per-experiment transaction advisory lock (namespace
 * LOCK_NAMESPACE.assignment, key = experiment key): read the existing assignment, else the block state, draw a new
 * block when it is used up or was drawn from another template, take the next slot, advance, insert. Concurrent
 * calls on any number of nodes are serialised per experiment, so a block is never broken; ingest is not blocked.
 *
 * Pairs are stored in key order (lo < hi) with signed quantities for lo − hi; readers flip them for (hi, lo).
 */
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
import { LOCK_NAMESPACE } from './api-keys.js';
import { notifyChange } from './notifier.js';
import { lockExperiments, type PostgresDatabase } from './pool.js';

import { LOOK_COLUMNS, lookFromRow, orderPair, type LookRow } from '../look-rows.js';

export class PostgresLookRepository implements LookRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async list(experimentKey: number, measureKey: number, conditionKeys: [number, number]): Promise<LookRecord[]> {
    const { lo, hi, flipped } = orderPair(conditionKeys);
    const r = await this.db.query<LookRow>(
      `SELECT ${LOOK_COLUMNS} FROM interim_looks WHERE experiment_id = $1 AND measure_id = $2 AND condition_lo = $3 AND condition_hi = $4 ORDER BY number`,
      [experimentKey, measureKey, lo, hi],
    );
    return r.rows.map((x) => lookFromRow(x, flipped));
  }

  async listAll(experimentKey: number): Promise<LookRecord[]> {
    const r = await this.db.query<LookRow>(`SELECT ${LOOK_COLUMNS} FROM interim_looks WHERE experiment_id = $1 ORDER BY id`, [experimentKey]);
    return r.rows.map((x) => lookFromRow(x, false));
  }

  async record(experimentKey: number, look: NewLook, expectedPrevious: number, apiKeyId: number | null): Promise<RecordLookOutcome> {
    const { lo, hi, flipped } = orderPair(look.conditionKeys);
    return this.db.write(async (c): Promise<RecordLookOutcome> => {
      const state = (await lockExperiments(c, [experimentKey])).get(experimentKey);
      if (!state) throw new RangeError(`experiment key ${experimentKey} does not exist`);
      const existing = (
        await c.query<{ n: number }>(
          `SELECT count(*) AS n FROM interim_looks WHERE experiment_id = $1 AND measure_id = $2 AND condition_lo = $3 AND condition_hi = $4`,
          [experimentKey, look.measureKey, lo, hi],
        )
      ).rows[0].n;
      if (existing !== expectedPrevious) return { kind: 'raced', looks: existing };
      const s = flipped ? -1 : 1;
      await c.query(
        `INSERT INTO interim_looks (experiment_id, measure_id, condition_lo, condition_hi, number, recorded_at, data_version, fraction,
           n_lo, n_hi, planned_per_condition, spending, alpha, cumulative_alpha, alpha_spent, boundary_z, welch_t, welch_df, observed_z, api_key_id)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20)`,
        [
          experimentKey,
          look.measureKey,
          lo,
          hi,
          existing + 1,
          look.recordedAt,
          look.dataVersion,
          look.fraction,
          flipped ? look.nB : look.nA,
          flipped ? look.nA : look.nB,
          look.plannedPerCondition,
          look.spending,
          look.alpha,
          look.cumulativeAlpha,
          look.alphaSpent,
          look.boundaryZ,
          s * look.welchT,
          look.welchDf,
          s * look.observedZ,
          apiKeyId,
        ],
      );
      await notifyChange(c, { experimentKey, dataVersion: state.dataVersion, kind: 'look' });
      return { kind: 'recorded', look: { ...look, number: existing + 1 } };
    });
  }

  async count(experimentKey: number): Promise<number> {
    return (await this.db.query<{ n: number }>(`SELECT count(*) AS n FROM interim_looks WHERE experiment_id = $1`, [experimentKey])).rows[0].n;
  }

  async getArrivalValues(measureKey: number, conditionKeys: [number, number]): Promise<ArrivalValues> {
    return this.db.snapshot(async (c) => {
      const v = (
        await c.query<{ data_version: number }>(`SELECT e.data_version FROM experiments e JOIN measures m ON m.experiment_id = e.id WHERE m.id = $1`, [
          measureKey,
        ])
      ).rows[0];
      if (!v) throw new RangeError(`measure key ${measureKey} does not exist`);
      const [a, b] = conditionKeys;
      const rows = (
        await c.query<[number, number]>({
          text: `SELECT condition_id, value FROM response_values WHERE measure_id = $1 AND excluded = 0 AND condition_id IN ($2, $3) ORDER BY response_id`,
          values: [measureKey, a, b],
          rowMode: 'array',
        })
      ).rows;
      const group = new Uint8Array(rows.length);
      const values = new Float64Array(rows.length);
      for (let i = 0; i < rows.length; i++) {
        group[i] = rows[i][0] === a ? 0 : 1;
        values[i] = rows[i][1];
      }
      return { group, values, dataVersion: v.data_version };
    });
  }

  async recordAnytime(key: AnytimeHistoryKey, point: AnytimePoint, recordedAt: string): Promise<void> {
    const { lo, hi, flipped } = orderPair(key.conditionKeys);
    await this.db.query(
      `INSERT INTO anytime_history (experiment_id, measure_id, condition_lo, condition_hi, alpha, target_per_condition, data_version,
         recorded_at, n_lo, n_hi, p, lower, upper)
       VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13) ON CONFLICT DO NOTHING`,
      [
        key.experimentKey,
        key.measureKey,
        lo,
        hi,
        key.alpha,
        key.targetPerCondition,
        point.dataVersion,
        recordedAt,
        flipped ? point.nB : point.nA,
        flipped ? point.nA : point.nB,
        point.p,
        flipped ? -point.upper : point.lower,
        flipped ? -point.lower : point.upper,
      ],
    );
  }

  async runningAnytime(key: AnytimeHistoryKey, minPerCondition: number) {
    const { lo, hi, flipped } = orderPair(key.conditionKeys);
    const r = (
      await this.db.query<{ p: number | null; lower: number | null; upper: number | null; points: number; first: number | null; last: number | null }>(
        `SELECT min(p) AS p, max(lower) AS lower, min(upper) AS upper, count(*) AS points, min(data_version) AS first, max(data_version) AS last
         FROM anytime_history
         WHERE experiment_id = $1 AND measure_id = $2 AND condition_lo = $3 AND condition_hi = $4 AND alpha = $5 AND target_per_condition = $6
           AND n_lo >= $7 AND n_hi >= $7`,
        [key.experimentKey, key.measureKey, lo, hi, key.alpha, key.targetPerCondition, minPerCondition],
      )
    ).rows[0];
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

export class PostgresAssignmentRepository implements AssignmentRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async assign(experimentKey: number, respondent: string, plan: AssignmentPlan, now: string, apiKeyId: number | null): Promise<AssignOutcome> {
    if (plan.template.length === 0) throw new RangeError('the block template is empty');
    return this.db.write(async (c): Promise<AssignOutcome> => {
      await c.query(`SELECT pg_advisory_xact_lock($1, $2)`, [LOCK_NAMESPACE.assignment, experimentKey]);
      const status = (await c.query<{ status: string }>(`SELECT status FROM experiments WHERE id = $1`, [experimentKey])).rows[0]?.status;
      if (status === undefined) return { kind: 'not-found' };
      if (status !== 'open') return { kind: 'closed' };
      const before = (
        await c.query<{ condition_id: number }>(`SELECT condition_id FROM assignments WHERE experiment_id = $1 AND respondent = $2`, [experimentKey, respondent])
      ).rows[0];
      if (before) return { kind: 'assigned', conditionKey: before.condition_id, created: false };
      const template = JSON.stringify(plan.template);
      const state = (
        await c.query<{ block_number: number; template: number[]; block: number[]; position: number }>(
          `SELECT block_number, template, block, position FROM assignment_state WHERE experiment_id = $1`,
          [experimentKey],
        )
      ).rows[0];
      let conditionKey: number;
      let blockNumber: number;
      const block = state && JSON.stringify(state.template) === template ? state.block : null;
      if (state && block && state.position < block.length) {
        conditionKey = block[state.position];
        blockNumber = state.block_number;
        await c.query(`UPDATE assignment_state SET position = position + 1 WHERE experiment_id = $1`, [experimentKey]);
      } else {
        const drawn = plan.shuffle([...plan.template]);
        if (drawn.length !== plan.template.length) throw new Error('shuffle changed the block length');
        blockNumber = (state?.block_number ?? 0) + 1;
        conditionKey = drawn[0];
        await c.query(
          `INSERT INTO assignment_state (experiment_id, block_number, template, block, position) VALUES ($1, $2, $3::jsonb, $4::jsonb, 1)
           ON CONFLICT (experiment_id) DO UPDATE SET block_number = EXCLUDED.block_number, template = EXCLUDED.template,
             block = EXCLUDED.block, position = EXCLUDED.position`,
          [experimentKey, blockNumber, template, JSON.stringify(drawn)],
        );
      }
      await c.query(`INSERT INTO assignments (experiment_id, respondent, condition_id, block_number, assigned_at, api_key_id) VALUES ($1, $2, $3, $4, $5, $6)`, [
        experimentKey,
        respondent,
        conditionKey,
        blockNumber,
        now,
        apiKeyId,
      ]);
      return { kind: 'assigned', conditionKey, created: true };
    });
  }

  async summary(experimentKey: number): Promise<AssignmentCount[]> {
    const r = await this.db.query<{ condition_id: number; assigned: number; answered: number; elsewhere: number }>(
      `SELECT a.condition_id, count(*) AS assigned,
         count(*) FILTER (WHERE EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = a.experiment_id AND r.respondent = a.respondent)) AS answered,
         count(*) FILTER (WHERE EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = a.experiment_id AND r.respondent = a.respondent
                                          AND r.condition_id <> a.condition_id)) AS elsewhere
       FROM assignments a WHERE a.experiment_id = $1 GROUP BY a.condition_id ORDER BY a.condition_id`,
      [experimentKey],
    );
    return r.rows.map((x) => ({ conditionKey: x.condition_id, assigned: x.assigned, answered: x.answered, answeredOtherCondition: x.elsewhere }));
  }

  async unassignedResponses(experimentKey: number): Promise<{ conditionKey: number; responses: number }[]> {
    const r = await this.db.query<{ condition_id: number; responses: number }>(
      `SELECT r.condition_id, count(*) AS responses FROM responses r
       WHERE r.experiment_id = $1 AND (r.respondent IS NULL OR NOT EXISTS
         (SELECT 1 FROM assignments a WHERE a.experiment_id = $1 AND a.respondent = r.respondent))
       GROUP BY r.condition_id ORDER BY r.condition_id`,
      [experimentKey],
    );
    return r.rows.map((x) => ({ conditionKey: x.condition_id, responses: x.responses }));
  }

  async listWithBlocks(experimentKey: number): Promise<{ conditionKey: number; blockNumber: number }[]> {
    const r = await this.db.query<{ condition_id: number; block_number: number }>(
      `SELECT condition_id, block_number FROM assignments WHERE experiment_id = $1 ORDER BY id`,
      [experimentKey],
    );
    return r.rows.map((x) => ({ conditionKey: x.condition_id, blockNumber: x.block_number }));
  }
}
