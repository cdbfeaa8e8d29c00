/**
 * The SQLite side of a comparison worker thread (SortedRunsReader.workerReads): the worker pool of the comparison
 * service imports this module inside a worker and calls readRunsInWorker, which reads every sorted run a snapshot
 * needs whole, on the thread's own read-only connection to the same WAL file (one connection per file, kept for the
 * worker's life), with SqliteResponseRepository.readRunsSnapshot: the same code the main thread runs. The trajectory
 * task reads the arrival order the same way (readArrivalInWorker, SqliteLookRepository.readArrivalValues).
 */
import type { ArrivalValues } from '../monitoring-types.js';
import type { RunsSnapshot } from '../types.js';
import { SqliteLookRepository } from './monitoring.js';
import { openDatabase, type SqliteDatabase } from './open.js';
import { SqliteResponseRepository } from './responses.js';

const connections = new Map<string, SqliteDatabase>();
const repositories = new Map<string, SqliteResponseRepository>();
const lookRepositories = new Map<string, SqliteLookRepository>();

function connection(source: string): SqliteDatabase {
  let db = connections.get(source);
  if (!db) {
    db = openDatabase(source, { readonly: true });
    connections.set(source, db);
  }
  return db;
}

export function readRunsInWorker(source: string, measureKey: number, conditionKeys: number[], includeExcluded: boolean): RunsSnapshot {
  let repo = repositories.get(source);
  if (!repo) {
    repo = new SqliteResponseRepository(connection(source));
    repositories.set(source, repo);
  }
  return repo.readRunsSnapshot(measureKey, conditionKeys, includeExcluded);
}

/** One measure's answers of two conditions in arrival order (the trajectory), with the same code as the main thread. */
export function readArrivalInWorker(source: string, measureKey: number, conditionKeys: [number, number]): ArrivalValues {
  let repo = lookRepositories.get(source);
  if (!repo) {
    repo = new SqliteLookRepository(connection(source));
    lookRepositories.set(source, repo);
  }
  return repo.readArrivalValues(measureKey, conditionKeys);
}
