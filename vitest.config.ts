import { defineConfig } from 'vitest/config';

/**
 * Service-level test files that also run against PostgreSQL (project "postgres": SPLITBALLOT_TEST_ENGINE=postgres,
 * a fresh database per test app copied from a migrated template, see tests/helpers/app.ts): every file of tests/http
 * and the service files that build a test app, except these (they run on SQLite only, in project "main"):
 *  - tests/http/postgres-outage.test.ts: PostgreSQL-only by itself (a relay in front of the server), in "main".
 *  - tests/services/comparisons/omnibus.test.ts, performance-paths.test.ts: open a SQLite store of their own (query
 *    plans, the SQLite caches); the omnibus routes run on PostgreSQL through tests/http/routes/omnibus.test.ts.
 *  - tests/reliability/backup-under-load, crash, shutdown: the SQLite file, its backups and the single-process lock.
 */
const ON_POSTGRES = [
  'tests/http/auth.test.ts',
  'tests/http/app.test.ts',
  'tests/http/problem-handler.test.ts',
  'tests/http/routes/batch.test.ts',
  'tests/http/routes/erasure.test.ts',
  'tests/http/routes/exclusions.test.ts',
  'tests/http/routes/events.test.ts',
  'tests/http/routes/experiments.test.ts',
  'tests/http/routes/exports.test.ts',
  'tests/http/routes/forms.test.ts',
  'tests/http/routes/looks.test.ts',
  'tests/http/routes/planning.test.ts',
  'tests/reliability/access-matrix.test.ts',
  'tests/http/form-keys.test.ts',
  'tests/http/log-redaction.test.ts',
  'tests/http/metrics.test.ts',
  'tests/http/parsing.test.ts',
  'tests/http/rate-limit.test.ts',
  'tests/http/routes/assignments.test.ts',
  'tests/http/routes/clean-up.test.ts',
  'tests/http/routes/covariates.test.ts',
  'tests/http/routes/form-client-routes.test.ts',
  'tests/http/routes/measure-roles.test.ts',
  'tests/http/routes/primary-change-audit.test.ts',
  'tests/http/routes/omnibus.test.ts',
  'tests/http/routes/overview.test.ts',
  'tests/http/routes/trajectory.test.ts',
  'tests/http/routes/weights-comparisons.test.ts',
  'tests/http/routes/weights-exports.test.ts',
  'tests/http/routes/weights-ingest.test.ts',
  'tests/http/secrets.test.ts',
  'tests/http/security.test.ts',
  'tests/services/comparisons/flagged-answers.test.ts',
  'tests/services/comparisons/flags.test.ts',
  'tests/services/comparisons/monitoring.test.ts',
  'tests/services/comparisons/reference.test.ts',
  'tests/services/comparisons/service.test.ts',
  'tests/reliability/concurrency.test.ts',
  'tests/services/monitoring/interim.test.ts',
  'tests/services/ingest/validate.test.ts',
  'tests/services/ingest/csv-import.test.ts',
  'tests/reliability/hostile.test.ts',
];

/**
 * Files that must run when nothing else does: tests/reliability/pg-restart.test.ts restarts the shared PostgreSQL
 * server (immediate mode), which would break the connections of any other test file running beside it. They form the
 * project "pg-restart", which `npm test` runs on its own after the other projects (`vitest run --project main
 * --project postgres && vitest run --project pg-restart`); the file itself runs only with SPLITBALLOT_TEST_PG_RESTART=1
 * or CI=true and skips with a notice otherwise.
 */
const ALONE = ['tests/reliability/pg-restart.test.ts'];

export default defineConfig({
  test: {
    exclude: ['node_modules/**', 'dist/**', 'tests/bench/**'],
    testTimeout: 30_000,
    hookTimeout: 60_000,
    pool: 'forks',
    setupFiles: ['tests/setup.ts'],
    reporters: ['default'],
    projects: [
      // Every test file as before (the engine-specific ones choose their engine themselves).
      { extends: true, test: { name: 'main', include: ['tests/**/*.test.ts'], exclude: [...ALONE, 'node_modules/**', 'dist/**', 'tests/bench/**'] } },
      { extends: true, test: { name: 'postgres', include: ON_POSTGRES, env: { SPLITBALLOT_TEST_ENGINE: 'postgres' } } },
      // Run by `npm test` in a second vitest run, after every other file (see ALONE).
      { extends: true, test: { name: 'pg-restart', include: ALONE } },
    ],
  },
});
