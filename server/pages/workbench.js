// The researcher's workbench parts of the results page: the primary outcome first, the sensitivity view of each
// comparison (what the extreme answers do), download buttons for the exports, and ISO 8601 times. Plain browser ES
// module imported by results.js; it receives results.js's element helpers so every displayed number is marked the
// same way (data-measure / data-field / data-format) and can be checked against the JSON by the browser test.

import { formatByKind } from './format.js';

/** An ISO 8601 time in UTC to the second ("2027-03-01T09:30:00Z"); the input text when it is not a time. */
export function isoTime(iso) {
  if (typeof iso !== 'string') return '—';
  const d = new Date(iso);
  return Number.isNaN(d.getTime()) ? iso : d.toISOString().replace(/\.\d{3}Z$/, 'Z');
}

/**
 * True when the answers use less than half of the scale: then the page adds the chart zoomed to their range. A short
 * whole-number scale (11 points or fewer) keeps the full view only: each of its points is readable anyway.
 */
export function wantsDataRange(m, cmp) {
  const g = cmp && cmp.groups;
  if (!g || typeof m.min !== 'number' || typeof m.max !== 'number' || !(m.max > m.min)) return false;
  if (m.integer && m.max - m.min + 1 <= 11) return false;
  const lows = [g.a && g.a.min, g.b && g.b.min].filter((v) => typeof v === 'number');
  const highs = [g.a && g.a.max, g.b && g.b.max].filter((v) => typeof v === 'number');
  if (lows.length === 0 || highs.length === 0) return false;
  return (Math.max(...highs) - Math.min(...lows)) / (m.max - m.min) < 0.5;
}

/** The measures with the primary outcome first (the others keep their definition order). */
export function primaryFirst(measures) {
  const list = Array.isArray(measures) ? measures.slice() : [];
  const i = list.findIndex((m) => m && m.primary === true);
  if (i > 0) list.unshift(...list.splice(i, 1));
  return list;
}

/**
 * The line under a measure's heading that says it is the primary outcome (and whether that was changed after data
 * collection began) or a process measure; null for an ordinary outcome.
 */
export function roleNote(h, def, m) {
  if (m.primary === true) {
    const changes = Array.isArray(def.primaryChanges) ? def.primaryChanges : [];
    const last = changes.length > 0 ? changes[changes.length - 1] : null;
    return h(
      'p',
      { class: 'role-note role-primary', 'data-role': 'primary' },
      h('strong', { text: 'Primary outcome' }),
      last && last.to === m.id
        ? h('span', { class: 'role-changed', 'data-field': 'primaryChanges', text: ` · changed after data collection began (on ${isoTime(last.at)}, at data version ${last.dataVersion})` })
        : null,
    );
  }
  if (m.role === 'process') {
    return h('p', { class: 'role-note role-process', 'data-role': 'process', text: 'Process measure · not part of the adjusted family' });
  }
  return null;
}

/** The adjusted-family sentence for one measure's family entry (which family, how large). */
export function adjustedHeading(entry, familyInfo) {
  if (!entry || !entry.adjusted) return null;
  if (entry.adjusted.welchP === null && entry.adjusted.mannWhitneyP === null && entry.adjusted.reason) return entry.adjusted.reason;
  const method = entry.adjusted.method === 'bh' ? 'Benjamini–Hochberg' : entry.adjusted.method === 'holm' ? 'Holm' : 'no adjustment';
  const size = familyInfo && typeof familyInfo.size === 'number' ? familyInfo.size : null;
  return size === null ? `Adjusted (${method}): ` : `Adjusted over the ${size} outcome comparison${size === 1 ? '' : 's'} (${method}; process measures are not in the family): `;
}

const COLUMNS = ['Data', 'Answers a / b', 'Mean difference a − b (interval)', 'Welch p', 'Hodges–Lehmann shift (interval)', 'Rank-sum p'];

const SCENARIO_NAMES = {
  without_far_out: 'Without the far-out answers',
  winsorised: 'Winsorised at the fences',
  without_most_influential: 'Without the most influential answer',
};

/**
 * The sensitivity view of one comparison: a table of the full-data result and the three scenarios (both tests,
 * estimate, interval, p), the sentences of the scenarios whose conclusion changes, and the note that this is a view,
 * not a recommendation. `num(field, kind, value)` makes a marked number for this measure.
 */
export function sensitivityBlock(h, num, cmp) {
  const s = cmp && cmp.sensitivity;
  const heading = h('h3', { text: 'What the extreme answers do' });
  if (!s) return h('section', { class: 'sensitivity' }, heading, h('p', { class: 'muted', text: 'The sensitivity view is not available for this comparison.' }));
  const rows = [{ name: 'All answers', path: 'sensitivity.full', result: s.full, affected: null }].concat(
    (s.scenarios || []).map((sc, i) => ({ name: SCENARIO_NAMES[sc.code] || sc.code, path: `sensitivity.scenarios.${i}.result`, result: sc.result, scenario: sc })),
  );
  const body = rows.map((r) => {
    const cells = [h('th', { scope: 'row' }, r.name, r.scenario ? h('span', { class: 'help', text: r.scenario.description }) : null)];
    if (!r.result) {
      cells.push(h('td', { colspan: '5', class: 'muted', text: (r.scenario && r.scenario.reason) || 'Not available.' }));
      return h('tr', { class: 'not-applicable', 'data-scenario': r.scenario ? r.scenario.code : 'full' }, ...cells);
    }
    const n = (field, kind) => num(`${r.path}.${field}`, kind, field.split('.').reduce((o, k) => (o === null || o === undefined ? o : o[k]), r.result));
    const changed = r.scenario && r.scenario.conclusionChanges;
    cells.push(
      h('td', { 'data-label': COLUMNS[1] }, n('n.a', 'count'), ' / ', n('n.b', 'count')),
      h('td', { 'data-label': COLUMNS[2] }, n('welch.estimate', 'number'), ' ', h('span', { class: 'ci' }, intervalOf(r.result.welch))),
      h('td', { 'data-label': COLUMNS[3], class: changed && changed.welch ? 'changed' : '' }, n('welch.p', 'p')),
      h('td', { 'data-label': COLUMNS[4] }, n('rankSum.estimate', 'number'), ' ', h('span', { class: 'ci' }, intervalOf(r.result.rankSum))),
      h('td', { 'data-label': COLUMNS[5], class: changed && changed.rankSum ? 'changed' : '' }, n('rankSum.p', 'p')),
    );
    return h('tr', { 'data-scenario': r.scenario ? r.scenario.code : 'full' }, ...cells);
  });
  const table = h(
    'div',
    { class: 'table-scroll', role: 'region', 'aria-label': 'Sensitivity view (scrolls sideways)', tabindex: '0' },
    h(
      'table',
      { class: 'sensitivity-table' },
      h('caption', { class: 'visually-hidden', text: 'Both tests on all answers and without or with tamed extreme answers' }),
      h('thead', {}, h('tr', {}, ...COLUMNS.map((t) => h('th', { scope: 'col', text: t })))),
      h('tbody', {}, ...body),
    ),
  );
  const sentences = (s.scenarios || []).filter((sc) => sc.sentence).map((sc) => h('li', { class: 'sensitivity-sentence', text: sc.sentence }));
  return h(
    'section',
    { class: 'sensitivity' },
    heading,
    table,
    sentences.length > 0 ? h('ul', { class: 'sensitivity-sentences' }, ...sentences) : h('p', { class: 'muted', text: `No conclusion at α = ${s.alpha} changes in these views.` }),
    h('p', { class: 'caveat', text: s.note }),
  );
}

function intervalOf(test) {
  if (!test) return '';
  return formatByKind('interval', { lower: test.lower, upper: test.upper });
}

/** A file name for a download: "<study>-responses.csv". */
function fileName(id, what) {
  return `${String(id).replace(/[^A-Za-z0-9_-]/g, '-')}-${what}`;
}

/**
 * Download buttons for the exports. Each one fetches with the page's key (Authorization header; nothing in the
 * address) and saves the bytes it received as a file. `fetchWithKey(path, accept)` is results.js's api().
 */
export function downloadsBlock(h, id, base, fetchWithKey) {
  const status = h('span', { class: 'download-status', role: 'status', 'aria-live': 'polite' });
  const items = [
    { what: 'responses.csv', label: 'Responses (CSV)', accept: 'text/csv' },
    { what: 'responses.ndjson', label: 'Responses (NDJSON)', accept: 'application/x-ndjson' },
    { what: 'comparisons.csv', label: 'Comparisons (CSV)', accept: 'text/csv' },
  ];
  const buttons = items.map((it) => {
    const b = h('button', { type: 'button', class: 'button-quiet download', 'data-download': it.what, text: it.label });
    b.addEventListener('click', async () => {
      b.disabled = true;
      status.textContent = `Preparing ${it.label}…`;
      try {
        const res = await fetchWithKey(`${base}/${it.what}`, it.accept);
        const blob = await res.blob();
        const url = URL.createObjectURL(blob);
        const a = h('a', { href: url, download: fileName(id, it.what), hidden: true });
        document.body.append(a);
        a.click();
        a.remove();
        setTimeout(() => URL.revokeObjectURL(url), 10_000);
        status.textContent = `${it.label} saved (${blob.size} bytes).`;
      } catch (err) {
        status.textContent = `${it.label} could not be downloaded: ${err && err.message ? err.message : String(err)}`;
      } finally {
        b.disabled = false;
      }
    });
    return b;
  });
  return h('section', { class: 'downloads', id: 'downloads', 'aria-label': 'Downloads' }, h('span', { class: 'downloads-title', text: 'Download: ' }), ...buttons, status);
}
