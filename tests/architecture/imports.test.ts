/**
 * The one-direction rule of server/ and stats/, read from the import statements of every .ts and .js file:
 *
 *   main.ts → cli/ → http/ → services/ → store/ → leaves (stats/, schemas/, views/, pages/, errors.ts, config.ts)
 *
 * A file may import its own layer or any layer below it, never one above. Inside that:
 *   - stats/ imports nothing of ours but stats/;
 *   - a leaf imports only leaves;
 *   - an engine folder under store/ (store/sqlite/, store/postgres/, …) is imported only by itself, by cli/ and by
 *     http/app.ts (the wiring); everything else sees the port, store/types.ts and store/monitoring-types.ts;
 *   - a route file (http/routes/) imports no other route file;
 *   - no circle of imports anywhere (type-only imports count too).
 * Each failure names the file, the import and the rule it breaks.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, normalize, relative } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const ROOT = join(dirname(fileURLToPath(import.meta.url)), '../..');

function sourceFiles(dir: string): string[] {
  const out: string[] = [];
  for (const name of readdirSync(join(ROOT, dir))) {
    const rel = join(dir, name);
    if (statSync(join(ROOT, rel)).isDirectory()) out.push(...sourceFiles(rel));
    else if (/\.(ts|js)$/.test(name) && !name.endsWith('.d.ts')) out.push(rel);
  }
  return out;
}

/** Relative specifiers of a file's static imports and re-exports, and of import('…') with a literal string. */
export function importSpecifiers(text: string): string[] {
  const specs: string[] = [];
  const statement = /^\s*(?:import|export)\b[^'"`;]*?\bfrom\s*(['"])([^'"]+)\1|^\s*import\s*(['"])([^'"]+)\3/gm;
  const dynamic = /\bimport\(\s*(['"])([^'"]+)\1\s*\)/g;
  for (const m of text.matchAll(statement)) specs.push(m[2] ?? m[4]);
  for (const m of text.matchAll(dynamic)) specs.push(m[2]);
  return specs.filter((s) => s.startsWith('.'));
}

/** The file a relative specifier names (x.js may be x.ts in the sources; x.d.ts declares a browser x.js). */
function resolveImport(from: string, spec: string, known: Set<string>): string | null {
  const target = normalize(join(dirname(from), spec));
  if (known.has(target)) return target;
  if (target.endsWith('.js') && known.has(`${target.slice(0, -3)}.ts`)) return `${target.slice(0, -3)}.ts`;
  return null;
}

const LEAVES = ['stats/', 'server/schemas/', 'server/views/', 'server/pages/', 'server/errors.ts', 'server/config.ts'];
const LAYERS: [prefix: string, rank: number][] = [
  ['server/main.ts', 5],
  ['server/cli/', 4],
  ['server/http/', 3],
  ['server/services/', 2],
  ['server/store/', 1],
];

export function rankOf(file: string): number {
  if (LEAVES.some((p) => file === p || file.startsWith(p))) return 0;
  for (const [prefix, rank] of LAYERS) if (file === prefix || file.startsWith(prefix)) return rank;
  return -1;
}

const engineOf = (file: string): string | null => /^server\/store\/([^/]+)\//.exec(file)?.[1] ?? null;

/** Every broken rule of one import (empty when it is allowed). */
export function brokenRules(from: string, to: string): string[] {
  const broken: string[] = [];
  const rf = rankOf(from);
  const rt = rankOf(to);
  if (rf < 0) broken.push(`${from} belongs to no layer`);
  if (rt < 0) broken.push(`${to} belongs to no layer`);
  if (rf >= 0 && rt >= 0 && rt > rf) broken.push('imports upward');
  if (from.startsWith('stats/') && !to.startsWith('stats/')) broken.push('stats/ imports nothing of ours but stats/');
  const engine = engineOf(to);
  if (engine !== null && engineOf(from) !== engine && !from.startsWith('server/cli/') && from !== 'server/http/app.ts') {
    broken.push(`reaches into store/${engine}/ (use the port, store/types.ts)`);
  }
  if (from.startsWith('server/http/routes/') && to.startsWith('server/http/routes/')) broken.push('a route imports another route');
  return broken;
}

/** Strongly connected components with more than one file (or a file importing itself): Tarjan, O(V + E). */
export function circles(graph: Map<string, string[]>): string[][] {
  let index = 0;
  const stack: string[] = [];
  const on = new Set<string>();
  const idx = new Map<string, number>();
  const low = new Map<string, number>();
  const found: string[][] = [];
  const visit = (v: string): void => {
    idx.set(v, index);
    low.set(v, index);
    index++;
    stack.push(v);
    on.add(v);
    for (const w of graph.get(v) ?? []) {
      if (!idx.has(w)) {
        visit(w);
        low.set(v, Math.min(low.get(v)!, low.get(w)!));
      } else if (on.has(w)) low.set(v, Math.min(low.get(v)!, idx.get(w)!));
    }
    if (low.get(v) === idx.get(v)) {
      const scc: string[] = [];
      let w: string;
      do {
        w = stack.pop()!;
        on.delete(w);
        scc.push(w);
      } while (w !== v);
      if (scc.length > 1 || (graph.get(v) ?? []).includes(v)) found.push(scc.sort());
    }
  };
  for (const v of graph.keys()) if (!idx.has(v)) visit(v);
  return found;
}

function importGraph(): Map<string, string[]> {
  const files = [...sourceFiles('server'), ...sourceFiles('stats')].map((f) => relative(ROOT, join(ROOT, f)));
  const known = new Set([...files, ...sourceFiles('server').filter((f) => f.endsWith('.js'))]);
  const graph = new Map<string, string[]>();
  for (const f of files) {
    const targets: string[] = [];
    for (const spec of importSpecifiers(readFileSync(join(ROOT, f), 'utf8'))) {
      const t = resolveImport(f, spec, known);
      if (t === null) throw new Error(`${f}: import '${spec}' names no file of server/ or stats/`);
      // A browser module's JSDoc may name its own declarations (`import('./collect.js').Type`): not an edge.
      if (t !== f) targets.push(t);
    }
    graph.set(f, targets);
  }
  return graph;
}

describe('import direction of server/ and stats/', () => {
  const graph = importGraph();

  it('reads a real tree', () => {
    expect(graph.size).toBeGreaterThan(50);
    expect(graph.get('server/main.ts')).toEqual(['server/cli/run.ts']);
  });

  it('no import runs upward, into an engine folder from outside, or between routes', () => {
    const violations: string[] = [];
    for (const [from, targets] of graph) {
      for (const to of targets) for (const rule of brokenRules(from, to)) violations.push(`${from} → ${to}: ${rule}`);
    }
    expect(violations).toEqual([]);
  });

  it('no circles', () => {
    expect(circles(graph).map((c) => c.join(' ↔ '))).toEqual([]);
  });
});

describe('the checker itself', () => {
  it('finds upward imports, engine reach-ins, route siblings and circles', () => {
    expect(brokenRules('server/store/types.ts', 'server/services/samples.ts')).toEqual(['imports upward']);
    expect(brokenRules('server/schemas/common.ts', 'server/errors.ts')).toEqual([]);
    expect(brokenRules('server/views/charts.ts', 'server/http/app.ts')).toEqual(['imports upward']);
    expect(brokenRules('stats/welch.ts', 'server/errors.ts')).toEqual(['stats/ imports nothing of ours but stats/']);
    expect(brokenRules('server/services/comparisons/service.ts', 'server/store/sqlite/responses.ts')).toEqual([
      'reaches into store/sqlite/ (use the port, store/types.ts)',
    ]);
    expect(brokenRules('server/cli/serve.ts', 'server/store/sqlite/store.ts')).toEqual([]);
    expect(brokenRules('server/http/routes/looks.ts', 'server/http/routes/experiments.ts')).toEqual(['a route imports another route']);
    expect(brokenRules('server/unplaced.ts', 'server/errors.ts')).toEqual(['server/unplaced.ts belongs to no layer']);
    const g = new Map([
      ['a', ['b']],
      ['b', ['c']],
      ['c', ['a']],
      ['d', ['a']],
    ]);
    expect(circles(g)).toEqual([['a', 'b', 'c']]);
    expect(circles(new Map([['a', ['b']], ['b', []]]))).toEqual([]);
  });

  it('reads import and export statements, type-only ones and literal dynamic imports, not strings', () => {
    const text = [
      "import { a } from './a.js';",
      "import type { B } from '../b.js';",
      "export { c } from './c.js';",
      "import './side-effect.js';",
      'import {',
      '  d,',
      "} from './d.js';",
      "const m = await import('./e.js');",
      "import { z } from 'zod';",
      "const s = `import { f } from './f.js'`;",
    ].join('\n');
    expect(importSpecifiers(text)).toEqual(['./a.js', '../b.js', './c.js', './side-effect.js', './d.js', './e.js']);
  });
});
