/**
 * The SQLite side of a comparison worker thread (SortedRunsReader.workerReads): the worker pool of the comparison
 * service imports this module inside a worker and calls readRunsInWorker, which reads every sorted run a snapshot
 * needs whole, on the thread's own read-only connection to the same WAL file (one connection per file, kept for the
 * worker's life), with SqliteResponseRepository.readRunsSnapshot: the same code the main thread runs.
 */
import type { RunsSnapshot } from '../types.js';
import { openDatabase } from './open.js';
import { SqliteResponseRepository } from './responses.js';

const repositories = new Map<string, SqliteResponseRepository>();

export function readRunsInWorker(source: string, measureKey: number, conditionKeys: number[], includeExcluded: boolean): RunsSnapshot {
  let repo = repositories.get(source);
  if (!repo) {
    repo = new SqliteResponseRepository(openDatabase(source, { readonly: true }));
    repositories.set(source, repo);
  }
  return repo.readRunsSnapshot(measureKey, conditionKeys, includeExcluded);
}
