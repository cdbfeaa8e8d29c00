/**
 * Every relative link in README.md and docs/*.md must resolve: the target file (or folder) exists, and a
 * `#anchor` — on its own or after a .md target — names a heading of that page (GitHub-style slugs) or an
 * explicit `<a id="…">`/`<a name="…">` anchor.
 *
 * What counts as a link: inline links and images, `[text](target "title")` and `![alt](target)`, and
 * reference definitions `[label]: target`, outside fenced code blocks and inline code spans. Targets with a
 * scheme (https:, mailto:, …) or starting with `//` are not checked here.
 *
 * Slugs follow GitHub's rule for headings: the heading's text (markup removed, code spans keep their
 * content), lower-cased, every character that is not a letter, digit, mark, connector (`_`), hyphen or space
 * dropped, spaces turned into hyphens; a repeated slug gets -1, -2, … in order of appearance. Setext headings
 * (text underlined with === or ---) are not recognised; the pages use # headings only.
 *
 * This test reads files only; it imports nothing from the service.
 */
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '../..');

interface Link {
  readonly line: number;
  readonly target: string;
}

/** The lines of a markdown text with fenced code blocks blanked out (line numbers are kept). */
function withoutFences(text: string): string[] {
  const lines = text.split(/\r?\n/);
  let fence: string | null = null;
  return lines.map((line) => {
    const opening = /^ {0,3}(`{3,}|~{3,})/.exec(line);
    if (fence === null) {
      if (opening) {
        fence = opening[1];
        return '';
      }
      return line;
    }
    if (opening && opening[1][0] === fence[0] && opening[1].length >= fence.length && line.trim() === opening[1]) fence = null;
    return '';
  });
}

/** Removes inline code spans (`…`, ``…``) so that link-like text inside them is not read as a link. */
function withoutCodeSpans(line: string): string {
  return line.replace(/(`+)[\s\S]*?\1/g, (span) => ' '.repeat(span.length));
}

/** Every link target of a markdown text, with its 1-based line number. */
export function extractLinks(text: string): Link[] {
  const links: Link[] = [];
  withoutFences(text).forEach((raw, index) => {
    const line = withoutCodeSpans(raw);
    // Inline links and images: ](target) or ](<target>) with an optional "title".
    for (const m of line.matchAll(/\]\(\s*(<[^>]*>|[^\s()]*(?:\([^\s()]*\)[^\s()]*)*)(?:\s+(?:"[^"]*"|'[^']*'))?\s*\)/g)) {
      links.push({ line: index + 1, target: m[1].replace(/^<|>$/g, '') });
    }
    // Reference definitions: [label]: target
    const definition = /^ {0,3}\[[^\]]+\]:\s*(<[^>]*>|\S+)/.exec(line);
    if (definition) links.push({ line: index + 1, target: definition[1].replace(/^<|>$/g, '') });
  });
  return links;
}

/** GitHub's slug of one heading's text (markup already removed). */
export function slug(heading: string): string {
  return heading
    .toLowerCase()
    .replace(/[^\p{L}\p{M}\p{N}\p{Pc}\- ]/gu, '')
    .replace(/ /g, '-');
}

/** The plain text of a heading line's content: links and images become their text, code spans and emphasis lose their markers. */
function headingText(content: string): string {
  return content
    .replace(/\s+#+\s*$/, '') // closing hashes
    .replace(/!?\[([^\]]*)\]\([^)]*\)/g, '$1')
    .replace(/<[^>]+>/g, '')
    .replace(/`+/g, '')
    .replace(/\*+/g, '')
    .trim();
}

/** Every anchor a page offers: heading slugs (with -1, -2 … for repeats) and explicit id/name anchors. */
export function anchorsOf(text: string): Set<string> {
  const anchors = new Set<string>();
  const seen = new Map<string, number>();
  for (const line of withoutFences(text)) {
    const heading = /^ {0,3}#{1,6}\s+(.*)$/.exec(line);
    if (heading) {
      const base = slug(headingText(heading[1]));
      const count = seen.get(base) ?? 0;
      seen.set(base, count + 1);
      anchors.add(count === 0 ? base : `${base}-${count}`);
    }
    for (const m of line.matchAll(/<a\s+[^>]*?(?:id|name)\s*=\s*["']([^"']+)["']/gi)) anchors.add(m[1]);
  }
  return anchors;
}

/** Problems of the links in one markdown file (path relative to ROOT): "file:line: link → why". */
export function checkFile(file: string, text: string, readTarget: (absolute: string) => string | null): string[] {
  const problems: string[] = [];
  const here = dirname(join(ROOT, file));
  for (const { line, target } of extractLinks(text)) {
    const where = `${file}:${line}: (${target})`;
    if (target === '') {
      problems.push(`${where} is an empty link`);
      continue;
    }
    if (/^[a-z][a-z0-9+.-]*:/i.test(target) || target.startsWith('//')) continue;
    const hashAt = target.indexOf('#');
    const pathPart = hashAt === -1 ? target : target.slice(0, hashAt);
    const anchor = hashAt === -1 ? null : decodeURIComponent(target.slice(hashAt + 1));
    if (pathPart.startsWith('/')) {
      problems.push(`${where} is an absolute path; use a path relative to ${file}`);
      continue;
    }
    const absolute = pathPart === '' ? join(ROOT, file) : resolve(here, decodeURIComponent(pathPart));
    if (!absolute.startsWith(ROOT)) {
      problems.push(`${where} points outside the repository`);
      continue;
    }
    if (!existsSync(absolute)) {
      problems.push(`${where} → ${relative(ROOT, absolute)} does not exist`);
      continue;
    }
    if (anchor === null) continue;
    if (anchor === '') {
      problems.push(`${where} has an empty #anchor`);
      continue;
    }
    if (!absolute.endsWith('.md') || statSync(absolute).isDirectory()) continue;
    const targetText = pathPart === '' ? text : readTarget(absolute);
    if (targetText === null) continue;
    const anchors = anchorsOf(targetText);
    if (!anchors.has(anchor)) {
      problems.push(`${where} → no heading in ${relative(ROOT, absolute)} has the anchor #${anchor}`);
    }
  }
  return problems;
}

const readIfFile = (absolute: string): string | null => (existsSync(absolute) ? readFileSync(absolute, 'utf8') : null);

function markdownFiles(): string[] {
  const docs = existsSync(join(ROOT, 'docs'))
    ? readdirSync(join(ROOT, 'docs'))
        .filter((name) => name.endsWith('.md'))
        .sort()
        .map((name) => `docs/${name}`)
    : [];
  return ['README.md', ...docs];
}

describe('the link checker itself', () => {
  it('finds inline links, images and reference definitions, but nothing inside code', () => {
    const text = [
      'See [the API](docs/api.md) and ![a picture](img/x.png "title").',
      '[ref]: docs/methods.md#limitations',
      'Not a link: `[x](nowhere.md)`.',
      '```sh',
      'echo "[y](also-nowhere.md)"',
      '```',
      'External: [site](https://example.org/a) and [mail](mailto:someone@example.org).',
    ].join('\n');
    expect(extractLinks(text)).toEqual([
      { line: 1, target: 'docs/api.md' },
      { line: 1, target: 'img/x.png' },
      { line: 2, target: 'docs/methods.md#limitations' },
      { line: 7, target: 'https://example.org/a' },
      { line: 7, target: 'mailto:someone@example.org' },
    ]);
  });

  it('makes GitHub-style slugs, with -1, -2 for repeated headings', () => {
    expect(slug('Before you rely on the numbers')).toBe('before-you-rely-on-the-numbers');
    expect(slug('Polling: dataVersion, ETag and 304')).toBe('polling-dataversion-etag-and-304');
    expect(slug('The number to read while the study runs: monitoring.anytimeValid.running')).toBe(
      'the-number-to-read-while-the-study-runs-monitoringanytimevalidrunning',
    );
    expect(slug('3–5. Comparisons over HTTP')).toBe('35-comparisons-over-http');
    expect(slug('Shapiro–Wilk and fair_price')).toBe('shapirowilk-and-fair_price');
    const anchors = anchorsOf('# Keys\n## Keys\n### `Keys`\n<a id="custom"></a>\n```\n# not a heading\n```');
    expect([...anchors].sort()).toEqual(['custom', 'keys', 'keys-1', 'keys-2']);
  });

  it('reports a missing file, a missing anchor and an absolute path, naming file, line and link', () => {
    const pages: Record<string, string> = { [join(ROOT, 'README.md')]: '# Splitballot\n## Set-up\n' };
    const text = [
      '[fine](README.md#set-up)',
      '[gone](docs/no-such-page.md)',
      '[bad anchor](README.md#no-such-heading)',
      '[here](#local-heading)',
      '[absolute](/README.md)',
      '## Local heading',
    ].join('\n');
    const problems = checkFile('README.md', text, (absolute) => pages[absolute] ?? null);
    expect(problems).toEqual([
      'README.md:2: (docs/no-such-page.md) → docs/no-such-page.md does not exist',
      'README.md:3: (README.md#no-such-heading) → no heading in README.md has the anchor #no-such-heading',
      'README.md:5: (/README.md) is an absolute path; use a path relative to README.md',
    ]);
  });
});

describe('links in README.md and docs/', () => {
  const files = markdownFiles();

  it('README.md links to every documentation page', () => {
    const readme = readFileSync(join(ROOT, 'README.md'), 'utf8');
    const targets = new Set(extractLinks(readme).map((l) => l.target.split('#')[0]));
    const pages = files.filter((f) => f.startsWith('docs/'));
    expect(pages.length, 'docs/*.md pages found').toBeGreaterThan(0);
    const missing = pages.filter((page) => !targets.has(page));
    expect(missing, `pages that README.md does not link to: ${missing.join(', ')}`).toEqual([]);
  });

  it.each(files)('every relative link in %s resolves', (file) => {
    const text = readFileSync(join(ROOT, file), 'utf8');
    const problems = checkFile(file, text, readIfFile);
    expect(problems, `broken links:\n${problems.join('\n')}`).toEqual([]);
  });
});
