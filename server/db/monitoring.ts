/** Placeholder: SQLite repositories for interim looks and balanced assignments (interim-monitoring issue). */
import type { SqliteDatabase } from './open.js';
import type { AssignmentRepository, LookRepository } from './monitoring-types.js';

export class SqliteLookRepository implements LookRepository {
  constructor(readonly db: SqliteDatabase) {}
}

export class SqliteAssignmentRepository implements AssignmentRepository {
  constructor(readonly db: SqliteDatabase) {}
}
