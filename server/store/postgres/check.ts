/**
 * `splitballot check` for PostgreSQL: recompute every invariant the writing transactions keep and report each one
 * that does not hold, in the same report shape as the SQLite check (server/backup.ts CheckReport).
 *
 * Checked, in ONE REPEATABLE READ read-only transaction (a service writing meanwhile is seen at one moment):
 * value_counts = GROUP BY over response_values for integer measures (no stray rows of continuous measures, none
 * negative); conditions' response_count / excluded_count = their responses; response_values' condition and
 * excluded flag = their response's; responses name conditions, and values measures, of their own experiment;
 * every value inside its measure's limits (whole on an integer measure); data_version ≥ 1 once an experiment has
 * responses; the migrations applied match the files. PostgreSQL enforces foreign keys itself and has no
 * equivalent of PRAGMA integrity_check in core, so `integrity` stays empty (kept for the shared report shape).
 * Cost: O(values).
 */
import type { PgMigration } from './migrate.js';
import { pendingPostgresMigrations } from './migrate.js';
import type { PostgresDatabase } from './pool.js';

export interface PostgresCheckReport {
  ok: boolean;
  integrity: string[];
  /** Every invariant that does not hold, one sentence each (at most 50). */
  problems: string[];
  counts: { experiments: number; responses: number; values: number; valueCountRows: number; conditions: number; migrations: number };
  durationMs: number;
}

const MAX_PROBLEMS = 50;

export async function checkPostgres(
  db: PostgresDatabase,
  migrations: PgMigration[] | null = null,
  onStage: (stage: string) => void = () => undefined,
): Promise<PostgresCheckReport> {
  const started = Date.now();
  const problems: string[] = [];
  const integrity: string[] = [];
  const add = (p: string) => {
    if (problems.length < MAX_PROBLEMS) problems.push(p);
  };
  const counts = { experiments: 0, responses: 0, values: 0, valueCountRows: 0, conditions: 0, migrations: 0 };

  await db.snapshot(async (c) => {
    const required = ['schema_migrations', 'experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts'];
    const present = new Set(
      (await c.query<{ t: string }>(`SELECT tablename AS t FROM pg_catalog.pg_tables WHERE schemaname = current_schema()`)).rows.map((r) => r.t),
    );
    const missing = required.filter((t) => !present.has(t));
    if (missing.length > 0) {
      add(`not a splitballot database: table${missing.length === 1 ? '' : 's'} ${missing.join(', ')} missing`);
      return;
    }
    const one = async (sql: string, params: unknown[] = []): Promise<number> => (await c.query<{ n: number }>(sql, params)).rows[0].n;

    onStage('migrations: recorded checksums against the files');
    const applied = (await c.query<{ name: string; checksum: string; appliedAt: string }>(`SELECT name, checksum, applied_at AS "appliedAt" FROM schema_migrations ORDER BY name`)).rows;
    counts.migrations = applied.length;
    if (migrations) {
      try {
        const pending = pendingPostgresMigrations(applied, migrations);
        if (pending.length > 0) add(`${pending.length} migration(s) not applied: ${pending.map((m) => m.name).join(', ')}`);
      } catch (err) {
        add((err as Error).message);
      }
    }

    onStage('counts: value_counts, per-condition counters, values, data versions');
    counts.experiments = await one(`SELECT count(*) AS n FROM experiments`);
    counts.conditions = await one(`SELECT count(*) AS n FROM conditions`);
    counts.responses = await one(`SELECT count(*) AS n FROM responses`);
    counts.values = await one(`SELECT count(*) AS n FROM response_values`);
    counts.valueCountRows = await one(`SELECT count(*) AS n FROM value_counts`);

    const mismatches = (
      await c.query<{ measure_id: number; condition_id: number; excluded: number; value: number; counted: number; kept: number }>(
        `WITH raw AS (
           SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*) AS n
           FROM response_values v JOIN measures m ON m.id = v.measure_id
           WHERE m.is_integer
           GROUP BY v.measure_id, v.condition_id, v.excluded, v.value),
         kept AS (SELECT measure_id, condition_id, excluded, value, count AS n FROM value_counts WHERE count > 0)
         SELECT coalesce(raw.measure_id, kept.measure_id) AS measure_id, coalesce(raw.condition_id, kept.condition_id) AS condition_id,
                coalesce(raw.excluded, kept.excluded) AS excluded, coalesce(raw.value, kept.value) AS value,
                coalesce(raw.n, 0) AS counted, coalesce(kept.n, 0) AS kept
         FROM raw FULL OUTER JOIN kept
           ON raw.measure_id = kept.measure_id AND raw.condition_id = kept.condition_id
          AND raw.excluded = kept.excluded AND raw.value = kept.value
         WHERE raw.n IS NULL OR kept.n IS NULL OR raw.n <> kept.n
         ORDER BY 1, 2, 3, 4
         LIMIT 20`,
      )
    ).rows;
    for (const r of mismatches) {
      add(`value_counts for measure ${r.measure_id}, condition ${r.condition_id}, excluded ${r.excluded}, value ${r.value}: ${r.kept} kept but ${r.counted} stored values`);
    }
    // Migration 0005: the weighted count and the sums of weights and squared weights per value, recomputed from the
    // rows (sums compared with a relative tolerance of 1e-9: they are accumulated in floating point, in another order).
    const weightsPresent = await one(
      `SELECT count(*) AS n FROM information_schema.columns WHERE table_schema = current_schema() AND table_name = 'value_counts' AND column_name = 'weight_sum'`,
    );
    if (weightsPresent > 0) {
      const weightMismatches = (
        await c.query<{
          measure_id: number; condition_id: number; excluded: number; value: number;
          kept_n: number; counted_n: number; kept_sum: number; counted_sum: number; kept_sq: number; counted_sq: number;
        }>(
          `WITH raw AS (
             SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(r.weight) AS wn,
                    coalesce(sum(r.weight), 0) AS ws, coalesce(sum(r.weight * r.weight), 0) AS wq
             FROM response_values v JOIN measures m ON m.id = v.measure_id JOIN responses r ON r.id = v.response_id
             WHERE m.is_integer
             GROUP BY v.measure_id, v.condition_id, v.excluded, v.value)
           SELECT k.measure_id, k.condition_id, k.excluded, k.value, k.weighted_count AS kept_n, coalesce(raw.wn, 0) AS counted_n,
                  k.weight_sum AS kept_sum, coalesce(raw.ws, 0) AS counted_sum, k.weight_square_sum AS kept_sq, coalesce(raw.wq, 0) AS counted_sq
           FROM value_counts k LEFT JOIN raw
             ON raw.measure_id = k.measure_id AND raw.condition_id = k.condition_id AND raw.excluded = k.excluded AND raw.value = k.value
           WHERE k.weighted_count <> coalesce(raw.wn, 0)
              OR abs(k.weight_sum - coalesce(raw.ws, 0)) > 1e-9 * greatest(abs(k.weight_sum), abs(coalesce(raw.ws, 0)), 1e-300)
              OR abs(k.weight_square_sum - coalesce(raw.wq, 0)) > 1e-9 * greatest(abs(k.weight_square_sum), abs(coalesce(raw.wq, 0)), 1e-300)
           ORDER BY 1, 2, 3, 4
           LIMIT 20`,
        )
      ).rows;
      for (const r of weightMismatches) {
        add(
          `value_counts weights for measure ${r.measure_id}, condition ${r.condition_id}, excluded ${r.excluded}, value ${r.value}: ` +
            `${r.kept_n} weighted answers, Σw ${r.kept_sum}, Σw² ${r.kept_sq} kept but ${r.counted_n}, ${r.counted_sum}, ${r.counted_sq} stored`,
        );
      }
      const badWeights = await one(`SELECT count(*) AS n FROM responses WHERE weight IS NOT NULL AND NOT (weight > 0)`);
      if (badWeights > 0) add(`${badWeights} responses have a weight that is not greater than 0`);
    }
    const stray = await one(`SELECT count(*) AS n FROM value_counts vc JOIN measures m ON m.id = vc.measure_id WHERE NOT m.is_integer AND vc.count > 0`);
    if (stray > 0) add(`${stray} value_counts rows belong to continuous measures (only integer measures are counted)`);
    const zero = await one(`SELECT count(*) AS n FROM value_counts WHERE count <= 0`);
    if (zero > 0) add(`${zero} value_counts rows are zero or negative (rows reaching 0 are deleted)`);

    const conditionMismatches = (
      await c.query<{ experiment: string; condition: string; kept: number; kept_excluded: number; counted: number; counted_excluded: number }>(
        `SELECT e.slug AS experiment, c.slug AS condition, c.response_count AS kept, c.excluded_count AS kept_excluded,
                count(r.id) AS counted, coalesce(sum(r.excluded), 0) AS counted_excluded
         FROM conditions c JOIN experiments e ON e.id = c.experiment_id
         LEFT JOIN responses r ON r.condition_id = c.id
         GROUP BY c.id, e.slug
         HAVING c.response_count <> count(r.id) OR c.excluded_count <> coalesce(sum(r.excluded), 0)
         ORDER BY c.id
         LIMIT 20`,
      )
    ).rows;
    for (const r of conditionMismatches) {
      add(`condition ${r.experiment}/${r.condition}: counters say ${r.kept} responses (${r.kept_excluded} excluded) but ${r.counted} are stored (${r.counted_excluded} excluded)`);
    }

    const cross = await one(`SELECT count(*) AS n FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE c.experiment_id <> r.experiment_id`);
    if (cross > 0) add(`${cross} responses name a condition of another experiment`);
    const copied = await one(
      `SELECT count(*) AS n FROM response_values v JOIN responses r ON r.id = v.response_id WHERE v.condition_id <> r.condition_id OR v.excluded <> r.excluded`,
    );
    if (copied > 0) add(`${copied} values disagree with their response's condition or excluded flag`);
    const foreign = await one(
      `SELECT count(*) AS n FROM response_values v JOIN responses r ON r.id = v.response_id JOIN measures m ON m.id = v.measure_id WHERE m.experiment_id <> r.experiment_id`,
    );
    if (foreign > 0) add(`${foreign} values belong to a measure of another experiment`);
    const outside = (
      await c.query<{ measure: string; n: number }>(
        `SELECT m.slug AS measure, count(*) AS n FROM response_values v JOIN measures m ON m.id = v.measure_id
         WHERE v.value < m.min OR v.value > m.max OR (m.is_integer AND v.value <> round(v.value))
         GROUP BY m.id, m.slug ORDER BY m.id LIMIT 10`,
      )
    ).rows;
    for (const r of outside) add(`${r.n} values of measure ${r.measure} are outside its limits or not whole on an integer measure`);
    const versions = (
      await c.query<{ experiment: string; version: number }>(
        `SELECT e.slug AS experiment, e.data_version AS version FROM experiments e
         WHERE e.data_version < 0 OR (e.data_version = 0 AND EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = e.id))
         ORDER BY e.id LIMIT 10`,
      )
    ).rows;
    for (const r of versions) add(`experiment ${r.experiment} has data_version ${r.version} although it has responses`);
  });
  return { ok: problems.length === 0 && integrity.length === 0, integrity, problems, counts, durationMs: Date.now() - started };
}
