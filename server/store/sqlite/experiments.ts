/**
 * Experiments, their conditions and measures (SQLite). Definitions are read whole: one experiment row, its
 * conditions and measures in definition order. Per-condition counts come from counters that the ingest
 * transaction maintains (conditions.response_count / excluded_count), never from counting rows. A change of the
 * primary outcome after answers exist writes its audit row in the update's transaction (store/primary-outcome.ts).
 */
import { experimentRecord, type ConditionRow, type ExperimentRow, type MeasureRow } from '../experiment-rows.js';
import { primaryOutcomeChange } from '../primary-outcome.js';
import { AuditWriter } from './audit.js';
import type { SqliteDatabase } from './open.js';
import type {
  CreateExperimentResult,
  ExperimentPatch,
  ExperimentRecord,
  ExperimentRepository,
  MeasureRecord,
  NewExperiment,
  UpdateExperimentResult,
} from '../types.js';

/** Synchronous reads shared with the other SQLite repositories (they run inside their transactions). */
export class ExperimentReader {
  private readonly bySlug;
  private readonly byKey;
  private readonly all;
  private readonly conditionsOf;
  private readonly measuresOf;

  constructor(db: SqliteDatabase) {
    this.bySlug = db.prepare<[string], ExperimentRow>(`SELECT * FROM experiments WHERE slug = ?`);
    this.byKey = db.prepare<[number], ExperimentRow>(`SELECT * FROM experiments WHERE id = ?`);
    this.all = db.prepare<[], ExperimentRow>(`SELECT * FROM experiments ORDER BY id`);
    this.conditionsOf = db.prepare<[number], ConditionRow>(
      `SELECT id, slug, label, position, response_count, excluded_count FROM conditions WHERE experiment_id = ? ORDER BY position`,
    );
    this.measuresOf = db.prepare<[number], MeasureRow>(
      `SELECT id, slug, label, min, max, is_integer, required, position, role FROM measures WHERE experiment_id = ? ORDER BY position`,
    );
  }

  private toRecord(row: ExperimentRow): ExperimentRecord {
    const options = JSON.parse(row.options) as Record<string, unknown>;
    return experimentRecord({ ...row, options }, this.conditionsOf.all(row.id), this.measuresOf.all(row.id));
  }


  getBySlug(slug: string): ExperimentRecord | null {
    const row = this.bySlug.get(slug);
    return row ? this.toRecord(row) : null;
  }

  getByKey(key: number): ExperimentRecord | null {
    const row = this.byKey.get(key);
    return row ? this.toRecord(row) : null;
  }

  list(onlyKey: number | null): ExperimentRecord[] {
    if (onlyKey !== null) {
      const one = this.getByKey(onlyKey);
      return one ? [one] : [];
    }
    return this.all.all().map((row) => this.toRecord(row));
  }
}

export class SqliteExperimentRepository implements ExperimentRepository {
  private readonly reader: ExperimentReader;
  private readonly insertExperiment;
  private readonly insertCondition;
  private readonly insertMeasure;
  private readonly slugTaken;
  private readonly dataVersion;
  private readonly valueCount;
  private readonly updateExperiment;
  private readonly updateMeasure;
  private readonly createTx;
  private readonly updateTx;
  private readonly getTx;
  private readonly audit: AuditWriter;

  constructor(private readonly db: SqliteDatabase) {
    this.reader = new ExperimentReader(db);
    this.audit = new AuditWriter(db);
    this.insertExperiment = db.prepare<[string, string, number | null, number, string | null, string, string, string]>(
      `INSERT INTO experiments (slug, title, planned_per_condition, alpha, thank_you_url, options, created_at, updated_at)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.insertCondition = db.prepare<[number, string, string, number]>(
      `INSERT INTO conditions (experiment_id, slug, label, position) VALUES (?, ?, ?, ?)`,
    );
    this.insertMeasure = db.prepare<[number, string, string, number, number, number, number, number, string]>(
      `INSERT INTO measures (experiment_id, slug, label, min, max, is_integer, required, position, role) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.slugTaken = db.prepare<[string], { id: number }>(`SELECT id FROM experiments WHERE slug = ?`);
    this.dataVersion = db.prepare<[number], { data_version: number }>(`SELECT data_version FROM experiments WHERE id = ?`);
    this.valueCount = db.prepare<[number], { n: number }>(`SELECT count(*) AS n FROM response_values WHERE measure_id = ?`);
    this.updateExperiment = db.prepare<[string, string, number | null, number, string | null, string, string, number]>(
      `UPDATE experiments SET title = ?, status = ?, planned_per_condition = ?, alpha = ?, thank_you_url = ?, options = ?, updated_at = ? WHERE id = ?`,
    );
    this.updateMeasure = db.prepare<[string, number, number, number, number, number]>(
      `UPDATE measures SET label = ?, min = ?, max = ?, is_integer = ?, required = ? WHERE id = ?`,
    );

    this.getTx = db.transaction((slug: string) => this.reader.getBySlug(slug));

    this.createTx = db.transaction((def: NewExperiment, now: string): CreateExperimentResult => {
      if (this.slugTaken.get(def.id)) return { kind: 'duplicate' };
      const info = this.insertExperiment.run(
        def.id,
        def.title,
        def.plannedPerCondition,
        def.alpha,
        def.thankYouUrl,
        JSON.stringify(def.options ?? {}),
        now,
        now,
      );
      const key = Number(info.lastInsertRowid);
      def.conditions.forEach((c, i) => this.insertCondition.run(key, c.id, c.label, i));
      def.measures.forEach((m, i) =>
        this.insertMeasure.run(key, m.id, m.label, m.min, m.max, m.integer ? 1 : 0, m.required ? 1 : 0, i, m.role ?? 'outcome'),
      );
      const experiment = this.reader.getByKey(key);
      if (!experiment) throw new Error('experiment vanished inside its own transaction');
      return { kind: 'created', experiment };
    });

    this.updateTx = db.transaction((key: number, patch: ExperimentPatch, now: string): UpdateExperimentResult => {
      const current = this.reader.getByKey(key);
      if (!current) return { kind: 'not-found' };
      const locked: { id: string; values: number }[] = [];
      const invalid: { id: string; message: string }[] = [];
      const measureUpdates: { m: MeasureRecord; label: string; min: number; max: number; integer: boolean; required: boolean }[] = [];
      for (const p of patch.measures ?? []) {
        const m = current.measures.find((x) => x.id === p.id);
        if (!m) {
          invalid.push({ id: p.id, message: `unknown measure "${p.id}"` });
          continue;
        }
        const next = {
          m,
          label: p.label ?? m.label,
          min: p.min ?? m.min,
          max: p.max ?? m.max,
          integer: p.integer ?? m.integer,
          required: p.required ?? m.required,
        };
        const limitsChange = next.min !== m.min || next.max !== m.max || next.integer !== m.integer;
        if (limitsChange) {
          const n = this.valueCount.get(m.key)?.n ?? 0;
          if (n > 0) locked.push({ id: m.id, values: n });
        }
        if (!(next.min < next.max)) invalid.push({ id: m.id, message: `min (${next.min}) must be smaller than max (${next.max})` });
        else if (next.integer && (!Number.isInteger(next.min) || !Number.isInteger(next.max))) {
          invalid.push({ id: m.id, message: `an integer measure needs whole-number limits (min ${next.min}, max ${next.max})` });
        }
        measureUpdates.push(next);
      }
      if (locked.length > 0) return { kind: 'limits-locked', measures: locked };
      if (invalid.length > 0) return { kind: 'invalid-limits', measures: invalid };
      const primary = primaryOutcomeChange(current, patch.primary, now);
      // The audit row first: a failure of any later statement rolls it back with the rest.
      if (primary?.audit) this.audit.record(primary.audit);
      for (const u of measureUpdates) {
        this.updateMeasure.run(u.label, u.min, u.max, u.integer ? 1 : 0, u.required ? 1 : 0, u.m.key);
      }
      this.updateExperiment.run(
        patch.title ?? current.title,
        patch.status ?? current.status,
        patch.plannedPerCondition !== undefined ? patch.plannedPerCondition : current.plannedPerCondition,
        patch.alpha ?? current.alpha,
        patch.thankYouUrl !== undefined ? patch.thankYouUrl : current.thankYouUrl,
        JSON.stringify(mergeOptions(current.options, { ...patch.options, ...primary?.options })),
        now,
        key,
      );
      const experiment = this.reader.getByKey(key);
      if (!experiment) throw new Error('experiment vanished inside its own transaction');
      return { kind: 'updated', experiment };
    });
  }

  async create(definition: NewExperiment): Promise<CreateExperimentResult> {
    return this.createTx.immediate(definition, new Date().toISOString());
  }

  async getBySlug(slug: string): Promise<ExperimentRecord | null> {
    // One read transaction, so that the experiment row, its conditions and measures are one snapshot.
    return this.getTx(slug);
  }

  async list(onlyKey: number | null = null): Promise<ExperimentRecord[]> {
    return this.db.transaction(() => this.reader.list(onlyKey))();
  }

  async update(experimentKey: number, patch: ExperimentPatch, now: string): Promise<UpdateExperimentResult> {
    return this.updateTx.immediate(experimentKey, patch, now);
  }

  async getDataVersion(experimentKey: number): Promise<number | null> {
    return this.dataVersion.get(experimentKey)?.data_version ?? null;
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
