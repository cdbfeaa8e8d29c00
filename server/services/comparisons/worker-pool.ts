/**
 * The heavy path of a comparison off the main thread (issue 8, benchmark 6: ingest keeps answering while a large
 * continuous comparison is computed).
 *
 * A small pool of worker threads (node:worker_threads; one by default on a 2-core machine, at most 2) does two
 * kinds of task:
 *   read     every sorted run of a continuous measure that a snapshot needs, read whole by the store engine's own
 *            worker module (SortedRunsReader.workerReads in store/types.ts: for SQLite, store/sqlite/worker-reads.ts
 *            on the thread's own read-only connection, in ONE read transaction with the dataVersion and counters);
 *            the arrays live on SharedArrayBuffers, so the main thread keeps them in the engine's cache without a
 *            copy. The module is named by the store at run time, so this file knows no engine;
 *   compare  the two groups' Samples (fromSortedValues, or fromCounts for an integer measure read as per-value
 *            counts), compareSamples, computeFlags and the sensitivity view: pure stats/, plain objects back;
 *   omnibus  the Samples of every condition and compareConditionSamples (the omnibus route, omnibus.ts);
 *   weighted the statistics of a comparison's weighted block (weighted.ts) from its weighted snapshot;
 *   adjusted Lin's covariate-adjusted fit (adjusted.ts) from the per-respondent rows;
 *   chart    the box plot of two or more groups (views/charts/distribution.ts): the Samples, their summaries and the
 *            SVG text, so neither the O(n) summaries nor the thousands of formatted dots cost the main thread.
 *   trajectory  one measure's answers in arrival order, read by the engine's worker module (readArrivalInWorker) on
 *            the thread's own connection, turned into the few trajectory points there (monitoring/trajectory-points.ts),
 *            so neither the read nor the arrays ever reach the main thread.
 * The main thread decides what goes to a worker (service.ts: runs of at least the configured minimum of values);
 * small comparisons stay in-thread, where posting a message would cost more than the work.
 *
 * Failures: a worker that cannot start or open the database, or that throws, makes the caller run the same code
 * in-thread (so a real error, e.g. a RangeError from stats/, surfaces exactly as it would without workers).
 * Workers are unref'd while idle, so they never keep a process alive.
 */
import { existsSync } from 'node:fs';
import os from 'node:os';
import { fileURLToPath } from 'node:url';
import { isMainThread, parentPort, Worker, workerData } from 'node:worker_threads';
import { computeFlags, type Flag, type FlagContext } from '../../../stats/flags.js';
import {
  compareConditionSamples,
  compareSamples,
  fromCounts,
  fromSortedValues,
  type Alternative,
  type Comparison,
  type ConditionsComparison,
  type Sample,
} from '../../../stats/index.js';
import { sensitivity, type Sensitivity } from '../../../stats/sensitivity.js';
import { equivalence, type EquivalenceResult } from '../../../stats/equivalence.js';
import { describe } from '../../../stats/descriptives.js';
import { distributionGroupFromSample, type ChartScale } from '../../views/charts/common.js';
import { renderDistributionChart } from '../../views/charts/distribution.js';
import type { RunsSnapshot } from '../../store/types.js';
import { weightedFromSnapshot, type WeightedInput, type WeightedResult } from './weighted.js';
import { adjustedFromRows, type AdjustedInput } from './adjusted.js';
import type { AdjustedBlock } from '../../schemas/weighted.js';
import { trajectoryPoints, type ArrivalArrays, type TrajectoryOptions, type TrajectoryPointView } from '../monitoring/trajectory-points.js';

export interface ReadTask {
  kind: 'read';
  /** The engine's worker module (a file URL exporting readRunsInWorker) and the source it opens. */
  module: string;
  source: string;
  measureKey: number;
  conditionKeys: number[];
  includeExcluded: boolean;
}

/**
 * How a task's groups hold their answers: sorted values (the default), or per-value counts from `counts.min` (an
 * integer measure read as counts; services/samples.ts).
 */
export interface GroupsForm {
  counts?: { min: number };
}

/** The Sample of one group of a task, by its form. */
function sampleOf(group: Float64Array, form: GroupsForm, name: string): Sample {
  return form.counts ? fromCounts(group, form.counts.min, name) : fromSortedValues(group, name);
}

export interface CompareTask extends GroupsForm {
  kind: 'compare';
  a: Float64Array;
  b: Float64Array;
  alternative: Alternative;
  confidenceLevel: number;
  flagContext: FlagContext;
  /** The two one-sided tests of equivalence to compute as well (a margin is known), or absent. */
  equivalence?: { margin: number; alpha: number };
}

export interface CompareResult {
  cmp: Comparison;
  flags: readonly Flag[];
  /** The sensitivity view (stats/sensitivity.ts); absent only where a caller needs no view (warm-up). */
  sensitivity?: Sensitivity;
  /** stats/equivalence.ts on the same Samples, when the task asked for it. */
  equivalence?: EquivalenceResult;
}

/** The sensitivity view of a comparison, with the flags' alpha, scale, labels and fence multipliers. */
export function sensitivityOf(cmp: Comparison, samples: { a: Sample; b: Sample }, ctx: FlagContext, alternative: Alternative, confidenceLevel: number): Sensitivity {
  return sensitivity(cmp, samples, {
    alternative,
    confidenceLevel,
    alpha: ctx.alpha,
    scale: ctx.scale,
    labels: ctx.labels,
    ...(ctx.thresholds?.tukeyMultiplier !== undefined ? { tukeyMultiplier: ctx.thresholds.tukeyMultiplier } : {}),
    ...(ctx.thresholds?.farOutMultiplier !== undefined ? { farOutMultiplier: ctx.thresholds.farOutMultiplier } : {}),
  });
}

/** Every condition of a continuous measure at once (the omnibus route; omnibus.ts). */
export interface OmnibusTask extends GroupsForm {
  kind: 'omnibus';
  groups: Float64Array[];
  labels: string[];
  alpha: number;
  margin: number | null;
}

export interface TrajectoryTask {
  kind: 'trajectory';
  /** The engine's worker module (a file URL exporting readArrivalInWorker) and the source it opens. */
  module: string;
  source: string;
  measureKey: number;
  conditionKeys: [number, number];
  options: TrajectoryOptions;
}

export interface TrajectoryResult {
  dataVersion: number;
  points: TrajectoryPointView[];
}

/** The box plot of every group of a task side by side (the pairwise chart and the omnibus chart). */
export interface ChartTask extends GroupsForm {
  kind: 'chart';
  groups: Float64Array[];
  /** One label per group, as drawn. */
  labels: string[];
  measureLabel: string;
  scale: ChartScale;
  id: string;
  range?: 'scale' | 'data';
}

export interface WeightedTask extends WeightedInput {
  kind: 'weighted';
}

export interface AdjustedTask extends AdjustedInput {
  kind: 'adjusted';
}

type Task = ReadTask | CompareTask | OmnibusTask | TrajectoryTask | ChartTask | WeightedTask | AdjustedTask;

/** The same values on a SharedArrayBuffer (as they are when already shared), so a worker reads them without a copy. O(n). */
export function shareable(x: Float64Array): Float64Array {
  if (x.buffer instanceof SharedArrayBuffer) return x;
  const out = new Float64Array(new SharedArrayBuffer(x.length * Float64Array.BYTES_PER_ELEMENT));
  out.set(x);
  return out;
}
type Reply = { id: number; ok: true; result: unknown } | { id: number; ok: false; message: string };

/** The stats part of an omnibus comparison (also what the main thread runs in-thread). */
export function omnibusGroups(task: Omit<OmnibusTask, 'kind'>): ConditionsComparison {
  const samples = task.groups.map((g, i) => sampleOf(g, task, task.labels[i]));
  return compareConditionSamples(samples, { labels: task.labels, alpha: task.alpha, equivalenceMargin: task.margin });
}

/** The SVG of a chart task (also what the main thread runs in-thread). */
export function chartGroups(task: Omit<ChartTask, 'kind'>): string {
  const samples = task.groups.map((g, i) => sampleOf(g, task, `g${i}`));
  return renderDistributionChart({
    measureLabel: task.measureLabel,
    scale: task.scale,
    groups: samples.map((x, i) => distributionGroupFromSample(task.labels[i], x, { ...describe(x), shapiroWilk: null })),
    id: task.id,
    ...(task.range !== undefined ? { range: task.range } : {}),
  });
}

/** The stats part of a comparison of sorted values (the benchmarks' name for compareGroups without counts). */
export function compareSorted(task: Omit<CompareTask, 'kind' | 'counts'>): CompareResult {
  return compareGroups(task);
}

/** The stats part of a comparison (also what the main thread runs in-thread). */
export function compareGroups(task: Omit<CompareTask, 'kind'>): CompareResult {
  const a = sampleOf(task.a, task, 'a');
  const b = sampleOf(task.b, task, 'b');
  const cmp = compareSamples(a, b, { alternative: task.alternative, confidenceLevel: task.confidenceLevel });
  const flags = computeFlags(cmp, { a, b }, task.flagContext, task.alternative);
  const view = sensitivityOf(cmp, { a, b }, task.flagContext, task.alternative, task.confidenceLevel);
  return { cmp, flags, sensitivity: view, ...(task.equivalence ? { equivalence: equivalence(a, b, task.equivalence) } : {}) };
}

// ───────────────────────────── inside a worker ─────────────────────────────

const WORKER_MARK = 'splitballot-compare-worker';

if (!isMainThread && (workerData as { mark?: string } | null)?.mark === WORKER_MARK) {
  type ReadRuns = (source: string, measureKey: number, conditionKeys: number[], includeExcluded: boolean) => RunsSnapshot;
  type ReadArrival = (source: string, measureKey: number, conditionKeys: [number, number]) => ArrivalArrays & { dataVersion: number };
  type EngineModule = { readRunsInWorker: ReadRuns; readArrivalInWorker?: ReadArrival };
  const modules = new Map<string, Promise<EngineModule>>();
  const moduleFor = (module: string): Promise<EngineModule> => {
    let r = modules.get(module);
    if (!r) {
      r = import(module) as Promise<EngineModule>;
      modules.set(module, r);
    }
    return r;
  };
  const readerFor = async (module: string): Promise<ReadRuns> => (await moduleFor(module)).readRunsInWorker;
  const trajectoryIn = async (t: TrajectoryTask): Promise<TrajectoryResult> => {
    const read = (await moduleFor(t.module)).readArrivalInWorker;
    if (!read) throw new Error('the store engine reads no arrival order in a worker');
    const arrival = read(t.source, t.measureKey, t.conditionKeys);
    return { dataVersion: arrival.dataVersion, points: trajectoryPoints(arrival, t.options) };
  };
  parentPort!.on('message', async (msg: { id: number; task: Task }) => {
    let reply: Reply;
    try {
      const t = msg.task;
      const result: unknown =
        t.kind === 'read'
          ? (await readerFor(t.module))(t.source, t.measureKey, t.conditionKeys, t.includeExcluded)
          : t.kind === 'omnibus'
            ? omnibusGroups(t)
            : t.kind === 'trajectory'
              ? await trajectoryIn(t)
              : t.kind === 'chart'
                ? chartGroups(t)
                : t.kind === 'weighted'
                  ? weightedFromSnapshot(t)
                  : t.kind === 'adjusted'
                    ? adjustedFromRows(t)
                    : compareGroups(t);
      reply = { id: msg.id, ok: true, result };
    } catch (err) {
      reply = { id: msg.id, ok: false, message: err instanceof Error ? `${err.name}: ${err.message}` : String(err) };
    }
    parentPort!.postMessage(reply);
  });
}

// ───────────────────────────── the pool (main thread) ─────────────────────────────

interface Slot {
  worker: Worker;
  pending: Map<number, { resolve: (v: unknown) => void; reject: (e: Error) => void }>;
  dead: boolean;
}

/**
 * How to start a worker: the compiled file next to this one (dist/server/services/comparisons/worker-pool.js); when only the sources
 * exist (tests under vitest, scripts under tsx) the .ts file, loaded through tsx's ESM API inside the worker (a
 * worker does not inherit the parent's loader hooks).
 */
function workerEntry(): { code: string | URL; eval: boolean } | null {
  const js = new URL('./worker-pool.js', import.meta.url);
  if (existsSync(fileURLToPath(js))) return { code: js, eval: false };
  const ts = new URL('./worker-pool.ts', import.meta.url);
  if (!existsSync(fileURLToPath(ts))) return null;
  const code = `import('tsx/esm/api').then((api) => { api.register(); return import(${JSON.stringify(ts.href)}); })`;
  return { code, eval: true };
}

export class ComparePool {
  private readonly slots: Slot[] = [];
  private nextId = 1;
  private turn = 0;
  private unavailable = false;
  private deaths = 0;
  /** Tasks run in a worker, and tasks that fell back to the main thread (for tests and benchmarks). */
  readonly stats = { tasks: 0, fallbacks: 0 };

  constructor(readonly size: number = Math.min(2, Math.max(1, os.cpus().length - 1))) {}

  /** Run a task in a worker; rejects when no worker can run it (the caller then runs it in-thread). */
  run(task: ReadTask): Promise<RunsSnapshot>;
  run(task: CompareTask): Promise<CompareResult>;
  run(task: OmnibusTask): Promise<ConditionsComparison>;
  run(task: TrajectoryTask): Promise<TrajectoryResult>;
  run(task: ChartTask): Promise<string>;
  run(task: WeightedTask): Promise<Omit<WeightedResult, 'dataVersion'>>;
  run(task: AdjustedTask): Promise<AdjustedBlock>;
  run(task: Task): Promise<unknown> {
    const slot = this.slot();
    if (!slot) return Promise.reject(new Error('no comparison worker available'));
    const id = this.nextId++;
    return new Promise((resolve, reject) => {
      slot.pending.set(id, { resolve, reject });
      slot.worker.ref();
      this.stats.tasks++;
      slot.worker.postMessage({ id, task });
    });
  }

  /** Run in a worker, or in-thread with `fallback` when the worker fails. */
  async runOr<T>(task: Task, fallback: () => T): Promise<T> {
    try {
      return (await this.run(task as ReadTask & CompareTask & TrajectoryTask & ChartTask & WeightedTask & AdjustedTask)) as T;
    } catch {
      this.stats.fallbacks++;
      return fallback();
    }
  }

  private slot(): Slot | null {
    if (this.unavailable) return null;
    const live = this.slots.filter((s) => !s.dead);
    if (live.length < this.size) {
      const s = this.spawn();
      if (s) return s;
      if (live.length === 0) return null;
    }
    // The least busy live worker (ties: round robin).
    let best: Slot | null = null;
    for (let i = 0; i < live.length; i++) {
      const s = live[(this.turn + i) % live.length];
      if (!best || s.pending.size < best.pending.size) best = s;
    }
    this.turn++;
    return best;
  }

  private spawn(): Slot | null {
    const entry = workerEntry();
    if (!entry) {
      this.unavailable = true;
      return null;
    }
    let worker: Worker;
    try {
      worker = new Worker(entry.code, { workerData: { mark: WORKER_MARK }, eval: entry.eval });
    } catch {
      this.unavailable = true;
      return null;
    }
    const slot: Slot = { worker, pending: new Map(), dead: false };
    const failAll = (err: Error): void => {
      if (!slot.dead && ++this.deaths >= 3) this.unavailable = true; // a worker that keeps dying: stay in-thread
      slot.dead = true;
      for (const p of slot.pending.values()) p.reject(err);
      slot.pending.clear();
    };
    worker.on('message', (reply: Reply) => {
      const p = slot.pending.get(reply.id);
      if (!p) return;
      slot.pending.delete(reply.id);
      if (slot.pending.size === 0) worker.unref();
      if (reply.ok) p.resolve(reply.result);
      else p.reject(new Error(reply.message));
    });
    worker.on('error', (err) => failAll(err instanceof Error ? err : new Error(String(err))));
    worker.on('exit', () => failAll(new Error('comparison worker exited')));
    worker.unref();
    this.slots.push(slot);
    return slot;
  }

  /** Stop every worker (tests; a server that closes). */
  async close(): Promise<void> {
    const all = this.slots.splice(0);
    await Promise.all(all.map((s) => s.worker.terminate().catch(() => 0)));
  }
}

let shared: ComparePool | null = null;

/** The process-wide pool (created on first use). */
export function sharedComparePool(): ComparePool {
  if (!shared) shared = new ComparePool();
  return shared;
}
