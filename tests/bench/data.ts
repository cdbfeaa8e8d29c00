/**
 * Invented benchmark data from a seeded generator (no real survey data anywhere in the benchmarks).
 *
 * Two item types, two conditions each, one stream of MAX_N answers per condition; a benchmark at
 * size n uses the first n answers of each stream, so every size is a prefix of the next.
 *   continuous  a ~ Normal(0, 1),   b ~ 0.02 + 1.1 · Normal(0, 1)                (virtually no ties)
 *   integer     0–100 item: a = clamp(round(50 + 18·z), 0, 100), b = clamp(round(51 + 20·z), 0, 100)
 * Generator: xoshiro128** seeded through splitmix32 (one seed per stream), normals by the Marsaglia
 * polar method, uniforms with 53 random bits.
 *
 * The streams are written once to bench-results/data/<item>-<group>.f64 as Float64 little-endian,
 * in generation (arrival) order, so that the TypeScript, scipy and R benchmarks all read exactly the
 * same numbers. manifest.json records the generator, seeds and length; a mismatch regenerates.
 */
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { Rng } from '../helpers/rng.js';

export { Rng };

export const MAX_N = 1_000_000;
export const ITEM_MIN = 0;
export const ITEM_MAX = 100;
const GENERATOR = 'xoshiro128** / splitmix32 / Marsaglia polar, v1';
const SEEDS = { 'continuous-a': 20240101, 'continuous-b': 20240102, 'integer-a': 20240201, 'integer-b': 20240202 } as const;
export type StreamName = keyof typeof SEEDS;
export const STREAMS = Object.keys(SEEDS) as StreamName[];

function clampRound(x: number): number {
  const r = Math.round(x);
  return r < ITEM_MIN ? ITEM_MIN : r > ITEM_MAX ? ITEM_MAX : r;
}

export function generateStream(name: StreamName, n = MAX_N): Float64Array {
  const rng = new Rng(SEEDS[name]);
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const z = rng.normal();
    switch (name) {
      case 'continuous-a': out[i] = z; break;
      case 'continuous-b': out[i] = 0.02 + 1.1 * z; break;
      case 'integer-a': out[i] = clampRound(50 + 18 * z); break;
      case 'integer-b': out[i] = clampRound(51 + 20 * z); break;
    }
  }
  return out;
}

export function streamPath(dir: string, name: StreamName): string {
  return join(dir, `${name}.f64`);
}

interface Manifest {
  note: string;
  generator: string;
  seeds: Record<string, number>;
  length: number;
  format: string;
  streams: Record<string, string>;
}

/** Write the four streams to `dir` unless an identical manifest is already there. Returns true if written. */
export function ensureData(dir: string, log: (msg: string) => void = () => {}): boolean {
  const manifestPath = join(dir, 'manifest.json');
  const wanted: Manifest = {
    note: 'Invented benchmark data written by tests/bench/data.ts (seeded generator); regenerated when this manifest changes.',
    generator: GENERATOR,
    seeds: { ...SEEDS },
    length: MAX_N,
    format: 'Float64 little-endian, arrival order, one file per stream',
    streams: Object.fromEntries(STREAMS.map((s) => [s, `${s}.f64`])),
  };
  if (existsSync(manifestPath) && STREAMS.every((s) => existsSync(streamPath(dir, s)))) {
    try {
      const have = JSON.parse(readFileSync(manifestPath, 'utf8')) as Manifest;
      if (JSON.stringify(have) === JSON.stringify(wanted)) return false;
    } catch {
      /* regenerate */
    }
  }
  mkdirSync(dir, { recursive: true });
  for (const s of STREAMS) {
    log(`generating ${MAX_N.toLocaleString('en')} values of ${s}`);
    const data = generateStream(s);
    const buf = Buffer.alloc(data.length * 8);
    for (let i = 0; i < data.length; i++) buf.writeDoubleLE(data[i], i * 8);
    writeFileSync(streamPath(dir, s), buf);
  }
  writeFileSync(manifestPath, JSON.stringify(wanted, null, 2) + '\n');
  return true;
}

/** Read the first n values of a stream (Float64 little-endian). */
export function readStream(dir: string, name: StreamName, n: number): Float64Array {
  const buf = readFileSync(streamPath(dir, name));
  if (buf.length < n * 8) throw new RangeError(`${streamPath(dir, name)} holds ${buf.length / 8} values; ${n} needed`);
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = buf.readDoubleLE(i * 8);
  return out;
}

/** Per-value counts of a 0–100 item: counts[k] answers equal to ITEM_MIN + k. O(n). */
export function tally(values: ArrayLike<number>): Float64Array {
  const counts = new Float64Array(ITEM_MAX - ITEM_MIN + 1);
  for (let i = 0; i < values.length; i++) counts[values[i] - ITEM_MIN] += 1;
  return counts;
}
