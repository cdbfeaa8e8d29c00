/**
 * Experiments, their conditions and measures (PostgreSQL). A definition is read whole in one snapshot (the
 * experiment row, its conditions and measures in definition order). Per-condition counts come from the counters
 * the writing transactions maintain, never from counting rows. An update locks the experiment row first, so a
 * change of limits cannot slip past a concurrent ingest on another node, and a change of the primary outcome sees
 * the dataVersion as it is (after data collection began: an audit row in the same transaction, see
 * store/primary-outcome.ts).
 */
import type {
  CreateExperimentResult,
  ExperimentPatch,
  ExperimentRecord,
  ExperimentRepository,
  MeasureRecord,
  NewExperiment,
  UpdateExperimentResult,
} from '../types.js';
import { experimentRecord, type ConditionRow, type ExperimentRow, type MeasureRow } from '../experiment-rows.js';
import { primaryOutcomeChange } from '../primary-outcome.js';
import { recordAudit } from './audit.js';
import { notifyChange } from './notifier.js';
import { lockExperiments, type PostgresDatabase, type Queryable } from './pool.js';
import { readDefinitionBySlug } from './definition-read.js';

type PgExperimentRow = ExperimentRow<Record<string, unknown>>;
type PgConditionRow = ConditionRow & { experiment_id: number };
type PgMeasureRow = MeasureRow & { experiment_id: number };

/** Read experiments (by a WHERE on `e`) with their conditions and measures, inside the caller's transaction. */
export async function readExperiments(c: Queryable, where: string, params: unknown[]): Promise<ExperimentRecord[]> {
  const rows = (await c.query<PgExperimentRow>(`SELECT * FROM experiments e ${where} ORDER BY e.id`, params)).rows;
  if (rows.length === 0) return [];
  const keys = rows.map((r) => r.id);
  const conditions = (
    await c.query<PgConditionRow>(
      `SELECT id, experiment_id, slug, label, position, response_count, excluded_count FROM conditions WHERE experiment_id = ANY($1::bigint[]) ORDER BY experiment_id, position`,
      [keys],
    )
  ).rows;
  const measures = (
    await c.query<PgMeasureRow>(
      `SELECT id, experiment_id, slug, label, min, max, is_integer, required, position, role FROM measures WHERE experiment_id = ANY($1::bigint[]) ORDER BY experiment_id, position`,
      [keys],
    )
  ).rows;
  return rows.map((row) =>
    experimentRecord(
      row,
      conditions.filter((x) => x.experiment_id === row.id),
      measures.filter((m) => m.experiment_id === row.id),
    ),
  );
}

export class PostgresExperimentRepository implements ExperimentRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async create(def: NewExperiment): Promise<CreateExperimentResult> {
    const now = new Date().toISOString();
    return this.db.write(async (c) => {
      const inserted = await c.query<{ id: number }>(
        `INSERT INTO experiments (slug, title, planned_per_condition, alpha, thank_you_url, options, created_at, updated_at)
         VALUES ($1, $2, $3, $4, $5, $6::jsonb, $7, $7) ON CONFLICT (slug) DO NOTHING RETURNING id`,
        [def.id, def.title, def.plannedPerCondition, def.alpha, def.thankYouUrl, JSON.stringify(def.options ?? {}), now],
      );
      if (inserted.rowCount === 0) return { kind: 'duplicate' };
      const key = inserted.rows[0].id;
      await c.query(
        `INSERT INTO conditions (experiment_id, slug, label, position)
         SELECT $1, s, l, p FROM unnest($2::text[], $3::text[], $4::int[]) AS u(s, l, p)`,
        [key, def.conditions.map((x) => x.id), def.conditions.map((x) => x.label), def.conditions.map((_, i) => i)],
      );
      await c.query(
        `INSERT INTO measures (experiment_id, slug, label, min, max, is_integer, required, position, role)
         SELECT $1, s, l, mn, mx, i, r, p, ro FROM unnest($2::text[], $3::text[], $4::float8[], $5::float8[], $6::bool[], $7::bool[], $8::int[], $9::text[])
           AS u(s, l, mn, mx, i, r, p, ro)`,
        [
          key,
          def.measures.map((m) => m.id),
          def.measures.map((m) => m.label),
          def.measures.map((m) => m.min),
          def.measures.map((m) => m.max),
          def.measures.map((m) => m.integer),
          def.measures.map((m) => m.required),
          def.measures.map((_, i) => i),
          def.measures.map((m) => m.role ?? 'outcome'),
        ],
      );
      const [experiment] = await readExperiments(c, 'WHERE e.id = $1', [key]);
      return { kind: 'created', experiment };
    });
  }

  /** The read every request that names an experiment makes: one prepared statement (definition-read.ts), not a transaction of three. */
  async getBySlug(slug: string): Promise<ExperimentRecord | null> {
    return readDefinitionBySlug(this.db, slug);
  }

  async list(onlyKey: number | null = null): Promise<ExperimentRecord[]> {
    return this.db.snapshot((c) => (onlyKey === null ? readExperiments(c, '', []) : readExperiments(c, 'WHERE e.id = $1', [onlyKey])));
  }

  async update(experimentKey: number, patch: ExperimentPatch, now: string): Promise<UpdateExperimentResult> {
    return this.db.write(async (c) => {
      const locked = await lockExperiments(c, [experimentKey]);
      if (!locked.has(experimentKey)) return { kind: 'not-found' };
      const [current] = await readExperiments(c, 'WHERE e.id = $1', [experimentKey]);
      const lockedMeasures: { id: string; values: number }[] = [];
      const invalid: { id: string; message: string }[] = [];
      const updates: { m: MeasureRecord; label: string; min: number; max: number; integer: boolean; required: boolean }[] = [];
      for (const p of patch.measures ?? []) {
        const m = current.measures.find((x) => x.id === p.id);
        if (!m) {
          invalid.push({ id: p.id, message: `unknown measure "${p.id}"` });
          continue;
        }
        const next = { m, label: p.label ?? m.label, min: p.min ?? m.min, max: p.max ?? m.max, integer: p.integer ?? m.integer, required: p.required ?? m.required };
        if (next.min !== m.min || next.max !== m.max || next.integer !== m.integer) {
          const n = (await c.query<{ n: number }>(`SELECT count(*) AS n FROM response_values WHERE measure_id = $1`, [m.key])).rows[0].n;
          if (n > 0) lockedMeasures.push({ id: m.id, values: n });
        }
        if (!(next.min < next.max)) invalid.push({ id: m.id, message: `min (${next.min}) must be smaller than max (${next.max})` });
        else if (next.integer && (!Number.isInteger(next.min) || !Number.isInteger(next.max))) {
          invalid.push({ id: m.id, message: `an integer measure needs whole-number limits (min ${next.min}, max ${next.max})` });
        }
        updates.push(next);
      }
      if (lockedMeasures.length > 0) return { kind: 'limits-locked', measures: lockedMeasures };
      if (invalid.length > 0) return { kind: 'invalid-limits', measures: invalid };
      const primary = primaryOutcomeChange(current, patch.primary, now);
      // The audit row first: a failure of any later statement rolls it back with the rest.
      if (primary?.audit) await recordAudit(c, primary.audit);
      for (const u of updates) {
        await c.query(`UPDATE measures SET label = $1, min = $2, max = $3, is_integer = $4, required = $5 WHERE id = $6`, [
          u.label,
          u.min,
          u.max,
          u.integer,
          u.required,
          u.m.key,
        ]);
      }
      await c.query(
        `UPDATE experiments SET title = $1, status = $2, planned_per_condition = $3, alpha = $4, thank_you_url = $5, options = $6::jsonb, updated_at = $7 WHERE id = $8`,
        [
          patch.title ?? current.title,
          patch.status ?? current.status,
          patch.plannedPerCondition !== undefined ? patch.plannedPerCondition : current.plannedPerCondition,
          patch.alpha ?? current.alpha,
          patch.thankYouUrl !== undefined ? patch.thankYouUrl : current.thankYouUrl,
          JSON.stringify(mergeOptions(current.options, { ...patch.options, ...primary?.options })),
          now,
          experimentKey,
        ],
      );
      const [experiment] = await readExperiments(c, 'WHERE e.id = $1', [experimentKey]);
      await notifyChange(c, { experimentKey, dataVersion: experiment.dataVersion, kind: 'definition' });
      return { kind: 'updated', experiment };
    });
  }

  async getDataVersion(experimentKey: number): Promise<number | null> {
    const r = await this.db.query<{ data_version: number }>(`SELECT data_version FROM experiments WHERE id = $1`, [experimentKey]);
    return r.rows[0]?.data_version ?? null;
  }
}

/** Apply an options patch: each key is replaced; a null value removes the key. */
function mergeOptions(current: Record<string, unknown>, patch: Record<string, unknown> | undefined): Record<string, unknown> {
  const next: Record<string, unknown> = { ...current };
  for (const [k, v] of Object.entries(patch ?? {})) {
    if (v === null || v === undefined) delete next[k];
    else next[k] = v;
  }
  return next;
}
