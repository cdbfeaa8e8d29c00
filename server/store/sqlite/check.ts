/** splitballot check: integrity of a SQLite database file and the stored counts against the rows they summarise. */
import { existsSync } from 'node:fs';
import { openDatabase, type SqliteDatabase } from './open.js';
import { forEachPacked } from './packed-values.js';

// ---------------------------------------------------------------------------------------------------------------
// Check

export interface CheckReport {
  ok: boolean;
  /** Lines of PRAGMA integrity_check other than "ok" (at most 20). */
  integrity: string[];
  /** Every invariant that does not hold, one sentence each (at most 50). */
  problems: string[];
  counts: { experiments: number; responses: number; values: number; valueCountRows: number; conditions: number; migrations: number };
  durationMs: number;
}

export const MAX_PROBLEMS = 50;

export function columnExists(db: SqliteDatabase, table: string, column: string): boolean {
  return db.prepare(`SELECT 1 FROM pragma_table_info(?) WHERE name = ?`).pluck().get(table, column) !== undefined;
}

export function tableExists(db: SqliteDatabase, name: string): boolean {
  return db.prepare(`SELECT 1 FROM sqlite_schema WHERE type = 'table' AND name = ?`).pluck().get(name) !== undefined;
}

/**
 * Verify the file and the counts the service keeps. Reads only (runs inside one read transaction, so a server
 * writing meanwhile is seen at one consistent moment).
 */
export function checkDatabase(db: SqliteDatabase, onStage: (stage: string) => void = () => undefined): CheckReport {
  const started = Date.now();
  const problems: string[] = [];
  const add = (p: string) => {
    if (problems.length < MAX_PROBLEMS) problems.push(p);
  };

  onStage('integrity: PRAGMA integrity_check');
  const integrity = (db.prepare(`PRAGMA integrity_check(20)`).pluck().all() as string[]).filter((l) => l !== 'ok');
  const counts = { experiments: 0, responses: 0, values: 0, valueCountRows: 0, conditions: 0, migrations: 0 };
  if (integrity.length > 0) {
    return { ok: false, integrity, problems, counts, durationMs: Date.now() - started };
  }

  const required = ['schema_migrations', 'experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts'];
  const missing = required.filter((t) => !tableExists(db, t));
  if (missing.length > 0) {
    add(`not a splitballot database: table${missing.length === 1 ? '' : 's'} ${missing.join(', ')} missing`);
    return { ok: false, integrity, problems, counts, durationMs: Date.now() - started };
  }

  const read = db.transaction(() => {
    onStage('foreign keys: PRAGMA foreign_key_check');
    const fk = db.prepare(`PRAGMA foreign_key_check`).all() as { table: string; rowid: number; parent: string }[];
    for (const r of fk.slice(0, 10)) add(`${r.table} row ${r.rowid} refers to a missing ${r.parent} row`);
    if (fk.length > 10) add(`… and ${fk.length - 10} more foreign-key violations`);

    onStage('counts: value_counts, per-condition counters, values, data versions');
    counts.migrations = db.prepare(`SELECT count(*) FROM schema_migrations`).pluck().get() as number;
    counts.experiments = db.prepare(`SELECT count(*) FROM experiments`).pluck().get() as number;
    counts.conditions = db.prepare(`SELECT count(*) FROM conditions`).pluck().get() as number;
    counts.responses = db.prepare(`SELECT count(*) FROM responses`).pluck().get() as number;
    counts.values = db.prepare(`SELECT count(*) FROM response_values`).pluck().get() as number;
    counts.valueCountRows = db.prepare(`SELECT count(*) FROM value_counts`).pluck().get() as number;

    const valueCountMismatches = db
      .prepare(
        `WITH raw AS (
           SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*) AS n
           FROM response_values v JOIN measures m ON m.id = v.measure_id
           WHERE m.is_integer = 1
           GROUP BY v.measure_id, v.condition_id, v.excluded, v.value),
         kept AS (SELECT measure_id, condition_id, excluded, value, count AS n FROM value_counts WHERE count > 0)
         SELECT coalesce(raw.measure_id, kept.measure_id) AS measure_id, coalesce(raw.condition_id, kept.condition_id) AS condition_id,
                coalesce(raw.excluded, kept.excluded) AS excluded, coalesce(raw.value, kept.value) AS value,
                coalesce(raw.n, 0) AS counted, coalesce(kept.n, 0) AS kept
         FROM raw FULL OUTER JOIN kept
           ON raw.measure_id = kept.measure_id AND raw.condition_id = kept.condition_id
          AND raw.excluded = kept.excluded AND raw.value = kept.value
         WHERE raw.n IS NULL OR kept.n IS NULL OR raw.n != kept.n
         LIMIT 20`,
      )
      .all() as { measure_id: number; condition_id: number; excluded: number; value: number; counted: number; kept: number }[];
    for (const r of valueCountMismatches) {
      add(
        `value_counts for measure ${r.measure_id}, condition ${r.condition_id}, excluded ${r.excluded}, value ${r.value}: ` +
          `${r.kept} kept but ${r.counted} stored values`,
      );
    }
    // Migration 0005: the weighted count and the sums of weights and squared weights per value, recomputed from the
    // rows (sums compared with a relative tolerance of 1e-9: they are accumulated in floating point, in another order).
    if (columnExists(db, 'value_counts', 'weight_sum')) {
      const weightMismatches = db
        .prepare(
          `WITH raw AS (
             SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(r.weight) AS wn,
                    coalesce(sum(r.weight), 0) AS ws, coalesce(sum(r.weight * r.weight), 0) AS wq
             FROM response_values v JOIN measures m ON m.id = v.measure_id JOIN responses r ON r.id = v.response_id
             WHERE m.is_integer = 1
             GROUP BY v.measure_id, v.condition_id, v.excluded, v.value)
           SELECT k.measure_id, k.condition_id, k.excluded, k.value, k.weighted_count AS keptN, coalesce(raw.wn, 0) AS countedN,
                  k.weight_sum AS keptSum, coalesce(raw.ws, 0) AS countedSum, k.weight_square_sum AS keptSq, coalesce(raw.wq, 0) AS countedSq
           FROM value_counts k LEFT JOIN raw
             ON raw.measure_id = k.measure_id AND raw.condition_id = k.condition_id AND raw.excluded = k.excluded AND raw.value = k.value
           WHERE k.weighted_count != coalesce(raw.wn, 0)
              OR abs(k.weight_sum - coalesce(raw.ws, 0)) > 1e-9 * max(abs(k.weight_sum), abs(coalesce(raw.ws, 0)), 1e-300)
              OR abs(k.weight_square_sum - coalesce(raw.wq, 0)) > 1e-9 * max(abs(k.weight_square_sum), abs(coalesce(raw.wq, 0)), 1e-300)
           LIMIT 20`,
        )
        .all() as {
        measure_id: number; condition_id: number; excluded: number; value: number;
        keptN: number; countedN: number; keptSum: number; countedSum: number; keptSq: number; countedSq: number;
      }[];
      for (const r of weightMismatches) {
        add(
          `value_counts weights for measure ${r.measure_id}, condition ${r.condition_id}, excluded ${r.excluded}, value ${r.value}: ` +
            `${r.keptN} weighted answers, Σw ${r.keptSum}, Σw² ${r.keptSq} kept but ${r.countedN}, ${r.countedSum}, ${r.countedSq} stored`,
        );
      }
      const badWeights = db.prepare(`SELECT count(*) FROM responses WHERE weight IS NOT NULL AND NOT (weight > 0)`).pluck().get() as number;
      if (badWeights > 0) add(`${badWeights} responses have a weight that is not greater than 0`);
    }

    const strayCounts = db
      .prepare(
        `SELECT count(*) FROM value_counts vc JOIN measures m ON m.id = vc.measure_id WHERE m.is_integer = 0 AND vc.count > 0`,
      )
      .pluck()
      .get() as number;
    if (strayCounts > 0) add(`${strayCounts} value_counts rows belong to continuous measures (only integer measures are counted)`);
    const negative = db.prepare(`SELECT count(*) FROM value_counts WHERE count < 0`).pluck().get() as number;
    if (negative > 0) add(`${negative} value_counts rows are negative`);

    const conditionMismatches = db
      .prepare(
        `SELECT e.slug AS experiment, c.slug AS condition, c.response_count AS kept, c.excluded_count AS keptExcluded,
                count(r.id) AS counted, coalesce(sum(r.excluded), 0) AS countedExcluded
         FROM conditions c JOIN experiments e ON e.id = c.experiment_id
         LEFT JOIN responses r ON r.condition_id = c.id
         GROUP BY c.id
         HAVING c.response_count != count(r.id) OR c.excluded_count != coalesce(sum(r.excluded), 0)
         LIMIT 20`,
      )
      .all() as { experiment: string; condition: string; kept: number; keptExcluded: number; counted: number; countedExcluded: number }[];
    for (const r of conditionMismatches) {
      add(
        `condition ${r.experiment}/${r.condition}: counters say ${r.kept} responses (${r.keptExcluded} excluded) ` +
          `but ${r.counted} are stored (${r.countedExcluded} excluded)`,
      );
    }

    const crossExperiment = db
      .prepare(`SELECT count(*) FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE c.experiment_id != r.experiment_id`)
      .pluck()
      .get() as number;
    if (crossExperiment > 0) add(`${crossExperiment} responses name a condition of another experiment`);

    const copied = db
      .prepare(
        `SELECT count(*) FROM response_values v JOIN responses r ON r.id = v.response_id
         WHERE v.condition_id != r.condition_id OR v.excluded != r.excluded`,
      )
      .pluck()
      .get() as number;
    if (copied > 0) add(`${copied} values disagree with their response's condition or excluded flag`);

    const foreignMeasure = db
      .prepare(
        `SELECT count(*) FROM response_values v JOIN responses r ON r.id = v.response_id JOIN measures m ON m.id = v.measure_id
         WHERE m.experiment_id != r.experiment_id`,
      )
      .pluck()
      .get() as number;
    if (foreignMeasure > 0) add(`${foreignMeasure} values belong to a measure of another experiment`);

    const outside = db
      .prepare(
        `SELECT m.slug AS measure, count(*) AS n FROM response_values v JOIN measures m ON m.id = v.measure_id
         WHERE v.value < m.min OR v.value > m.max OR (m.is_integer = 1 AND v.value != round(v.value))
         GROUP BY m.id LIMIT 10`,
      )
      .all() as { measure: string; n: number }[];
    for (const r of outside) add(`${r.n} values of measure ${r.measure} are outside its limits or not whole on an integer measure`);

    // Migration 0008: response_values has no REFERENCES; its rows must still belong to a stored response and a measure.
    const orphans = db
      .prepare(
        `SELECT count(*) FROM response_values v
         WHERE NOT EXISTS (SELECT 1 FROM responses r WHERE r.id = v.response_id)
            OR NOT EXISTS (SELECT 1 FROM measures m WHERE m.id = v.measure_id)`,
      )
      .pluck()
      .get() as number;
    if (orphans > 0) add(`${orphans} values belong to no stored response or to no measure`);

    // Migration 0008: each response's packed copy of its values (responses.packed_values) names exactly its value
    // rows: every pair is found by its full key, no measure twice, and there are as many pairs as value rows.
    if (columnExists(db, 'responses', 'packed_values')) {
      onStage('values: packed copies on the response rows against response_values');
      const probe = db
        .prepare<[number, number, number, number, number], number>(
          `SELECT 1 FROM response_values WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ? AND response_id = ?`,
        )
        .pluck();
      const rows = db
        .prepare<[], [number, string, number, number, string]>(`SELECT id, response_id, condition_id, excluded, packed_values FROM responses ORDER BY id`)
        .raw();
      let pairs = 0;
      let missing = 0;
      let malformed = 0;
      for (const [id, responseId, conditionKey, excluded, packed] of rows.iterate()) {
        const seen = new Set<number>();
        try {
          forEachPacked(packed, (measureKey, value) => {
            pairs++;
            if (seen.has(measureKey) || !Number.isFinite(value)) throw new Error('duplicate measure');
            seen.add(measureKey);
            if (probe.get(measureKey, conditionKey, excluded, value, id) === undefined) {
              missing++;
              if (missing <= 5) add(`response ${responseId}: its value ${value} of measure ${measureKey} is not stored in response_values`);
            }
          });
        } catch {
          malformed++;
          if (malformed <= 5) add(`response ${responseId}: its packed values are malformed`);
        }
      }
      if (missing > 5) add(`… and ${missing - 5} more packed values missing from response_values`);
      if (pairs !== counts.values) add(`the responses' packed copies name ${pairs} values but response_values holds ${counts.values}`);
    }

    const versions = db
      .prepare(
        `SELECT e.slug AS experiment, e.data_version AS version FROM experiments e
         WHERE e.data_version < 0 OR (e.data_version = 0 AND EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = e.id))
         LIMIT 10`,
      )
      .all() as { experiment: string; version: number }[];
    for (const r of versions) add(`experiment ${r.experiment} has data_version ${r.version} although it has responses`);
  });
  read();
  return { ok: problems.length === 0, integrity, problems, counts, durationMs: Date.now() - started };
}

export const fmt = (n: number) => n.toLocaleString('en-US');

/** One line: "ok: …" or "FAILED: …". */
export function checkSummary(report: CheckReport, path: string): string {
  const c = report.counts;
  const what =
    `${fmt(c.experiments)} experiment${c.experiments === 1 ? '' : 's'}, ${fmt(c.responses)} responses, ${fmt(c.values)} values, ` +
    `${fmt(c.valueCountRows)} value_counts rows, ${fmt(c.conditions)} conditions, ${c.migrations} migration${c.migrations === 1 ? '' : 's'}`;
  const secs = (report.durationMs / 1000).toFixed(1);
  if (report.ok) return `check ok: ${path}: integrity ok, counts match (${what}) in ${secs} s`;
  const n = report.integrity.length + report.problems.length;
  return `check FAILED: ${path}: ${n} problem${n === 1 ? '' : 's'}${report.integrity.length > 0 ? ' (integrity_check failed)' : ''} (${what}) in ${secs} s`;
}

/** Open a file read-only and check it. Throws BackupError when it is not an SQLite database. */
export function checkFile(path: string, onStage?: (stage: string) => void): CheckReport {
  if (!existsSync(path)) throw new BackupError(`there is no database at ${path}`);
  let db: SqliteDatabase;
  try {
    db = openDatabase(path, { readonly: true });
  } catch (err) {
    throw new BackupError(`${path} cannot be opened as an SQLite database: ${(err as Error).message}`);
  }
  try {
    return checkDatabase(db, onStage);
  } catch (err) {
    const code = (err as { code?: string }).code ?? '';
    if (code === 'SQLITE_NOTADB' || code === 'SQLITE_CORRUPT') {
      return {
        ok: false,
        integrity: [`${path} is not a valid SQLite database (${code})`],
        problems: [],
        counts: { experiments: 0, responses: 0, values: 0, valueCountRows: 0, conditions: 0, migrations: 0 },
        durationMs: 0,
      };
    }
    throw err;
  } finally {
    db.close();
  }
}

export class BackupError extends Error {
  override name = 'BackupError';
}
