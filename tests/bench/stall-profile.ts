/**
 * Which functions hold the event loop: read a V8 CPU profile (`node --cpu-prof`, the .cpuprofile JSON) and list every
 * task that kept the loop busy longer than a threshold, with the functions that took its time. A script
 * helper, not a test; tests/bench/read-cost.ts --cpu-prof uses it on the served process's profile.
 *
 *   npx tsx tests/bench/stall-profile.ts FILE.cpuprofile [--min-ms 50] [--top 8]
 *
 * A sample whose leaf is "(idle)" is the thread waiting for I/O (Node marks the loop's poll phase as idle for the
 * profiler); anything else — JavaScript, "(program)" (native work outside JavaScript) or "(garbage collector)" — is
 * the loop busy. A task is a run of busy samples under one JavaScript entry (the frame below the profile's root: a
 * socket callback, processImmediate, listOnTimeout, processTicksAndRejections for a chain of promise reactions…);
 * native and collector samples belong to the task they fall in. Two tasks of the same entry back to back with no
 * sample between them count as one, so a long task is an upper bound of one callback's time (at 1 ms sampling).
 * Per task: its start (µs on the machine's monotonic clock, the clock of `process.hrtime`, so a caller can match it
 * to its own phases), its length, the share of collection pauses, and the functions with the most inclusive time
 * (each sample counts once per function on its stack), our own files first. Cost O(samples × stack depth).
 */
import { readFileSync } from 'node:fs';

interface CallFrame {
  functionName: string;
  url: string;
  lineNumber: number;
}

interface ProfileNode {
  id: number;
  callFrame: CallFrame;
  children?: number[];
}

export interface CpuProfile {
  nodes: ProfileNode[];
  startTime: number;
  endTime: number;
  samples: number[];
  timeDeltas: number[];
}

export interface FunctionTime {
  name: string;
  ms: number;
}

export interface BusyStretch {
  /** Start on the monotonic clock, µs (process.hrtime.bigint() / 1000n in any process of the same machine). */
  startMicros: number;
  ms: number;
  gcMs: number;
  /** Functions of server/ and stats/ by inclusive time, longest first. */
  own: FunctionTime[];
  /** Every function by self time, longest first (where the time was really spent). */
  self: FunctionTime[];
}

function frameName(f: CallFrame): string {
  const file = f.url.replace(/^file:\/\//, '').replace(/^.*\/(dist\/)?(server|stats|node_modules)\//, '$2/');
  return `${f.functionName || '(anonymous)'} ${file ? `${file}:${f.lineNumber + 1}` : ''}`.trim();
}

const isOwn = (url: string): boolean => /\/(server|stats)\//.test(url) && !url.includes('/node_modules/');

/** Every stretch of the loop busy for at least `minMs`, in time order. */
export function busyStretches(profile: CpuProfile, minMs = 50, top = 8): BusyStretch[] {
  const byId = new Map<number, ProfileNode>(profile.nodes.map((n) => [n.id, n]));
  const parent = new Map<number, number>();
  for (const n of profile.nodes) for (const c of n.children ?? []) parent.set(c, n.id);
  const stackOf = (id: number): ProfileNode[] => {
    const out: ProfileNode[] = [];
    for (let at: number | undefined = id; at !== undefined; at = parent.get(at)) out.push(byId.get(at)!);
    return out;
  };
  const times: number[] = [];
  let t = profile.startTime;
  for (let i = 0; i < profile.samples.length; i++) {
    t += profile.timeDeltas[i] ?? 0;
    times.push(t);
  }
  const rootId = profile.nodes[0].id;
  const idle = (i: number): boolean => byId.get(profile.samples[i])?.callFrame.functionName === '(idle)';
  /** The JavaScript entry of a sample (the frame just below the root), or null for native or collector time. */
  const entryOf = (i: number): number | null => {
    let at = profile.samples[i];
    while (parent.get(at) !== undefined && parent.get(at) !== rootId) at = parent.get(at)!;
    const name = byId.get(at)!.callFrame.functionName;
    return name === '(program)' || name === '(garbage collector)' ? null : at;
  };
  const out: BusyStretch[] = [];
  let i = 0;
  while (i < profile.samples.length) {
    if (idle(i)) {
      i++;
      continue;
    }
    // One task: busy samples under one JavaScript entry (native and collector samples join the task they fall in).
    const first = i;
    let entry = entryOf(i);
    i++;
    while (i < profile.samples.length && !idle(i)) {
      const e = entryOf(i);
      if (e !== null && entry !== null && e !== entry) break;
      if (entry === null) entry = e;
      i++;
    }
    const start = first > 0 ? times[first - 1] : times[first];
    const end = i < times.length ? times[i - 1] : profile.endTime;
    const ms = (end - start) / 1000;
    if (ms < minMs) continue;
    const inclusive = new Map<string, number>();
    const self = new Map<string, number>();
    let gc = 0;
    for (let k = first; k < i; k++) {
      const span = (times[k + 1] ?? end) - times[k];
      const stack = stackOf(profile.samples[k]);
      const leaf = stack[0].callFrame;
      if (leaf.functionName === '(garbage collector)') gc += span;
      self.set(frameName(leaf), (self.get(frameName(leaf)) ?? 0) + span);
      const seen = new Set<string>();
      for (const node of stack) {
        if (!isOwn(node.callFrame.url)) continue;
        const name = frameName(node.callFrame);
        if (seen.has(name)) continue;
        seen.add(name);
        inclusive.set(name, (inclusive.get(name) ?? 0) + span);
      }
    }
    const rank = (m: Map<string, number>): FunctionTime[] =>
      [...m]
        .sort((x, y) => y[1] - x[1])
        .slice(0, top)
        .map(([name, micros]) => ({ name, ms: micros / 1000 }));
    out.push({ startMicros: start, ms, gcMs: gc / 1000, own: rank(inclusive), self: rank(self) });
  }
  return out;
}

/** The stretches as text, `label(startMicros)` naming where each one happened (e.g. the benchmark's phase). */
export function formatStretches(stretches: BusyStretch[], label: (startMicros: number) => string = () => ''): string {
  if (stretches.length === 0) return 'no busy stretch over the threshold';
  return stretches
    .map((s) => {
      const head = `${s.ms.toFixed(0)} ms busy${label(s.startMicros) ? ` in ${label(s.startMicros)}` : ''} (collection ${s.gcMs.toFixed(0)} ms)`;
      const own = s.own.map((f) => `    ${f.ms.toFixed(0).padStart(5)} ms  ${f.name}`).join('\n');
      const self = s.self.map((f) => `    ${f.ms.toFixed(0).padStart(5)} ms  ${f.name}`).join('\n');
      return `${head}\n  inclusive, server/ and stats/:\n${own || '    (none)'}\n  self:\n${self}`;
    })
    .join('\n');
}

const invokedDirectly = process.argv[1]?.endsWith('stall-profile.ts') || process.argv[1]?.endsWith('stall-profile.js');
if (invokedDirectly) {
  const args = process.argv.slice(2);
  const file = args.find((a) => !a.startsWith('--') && !/^\d+$/.test(a));
  const num = (flag: string, fallback: number): number => {
    const k = args.indexOf(flag);
    return k >= 0 ? Number(args[k + 1]) : fallback;
  };
  if (!file) {
    process.stderr.write('usage: npx tsx tests/bench/stall-profile.ts FILE.cpuprofile [--min-ms 50] [--top 8]\n');
    process.exit(2);
  }
  const profile = JSON.parse(readFileSync(file, 'utf8')) as CpuProfile;
  const stretches = busyStretches(profile, num('--min-ms', 50), num('--top', 8));
  process.stdout.write(`${formatStretches(stretches, (s) => `+${((s - profile.startTime) / 1e6).toFixed(2)} s`)}\n`);
}
