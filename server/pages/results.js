// The results page of one study (served at /experiments/{id}). Plain browser ES module: no build step, no
// framework, nothing from another origin. Every text goes through textContent; the only markup inserted is
// the service's own SVG charts, parsed as XML and checked first.
//
// Flow: read key (sessionStorage, sent as "Authorization: Bearer …", never in a URL) → definition →
// one comparison per measure (+ its box plot and trajectory SVG) → live updates from the event stream
// (fetch + our own text/event-stream parser, because EventSource cannot send a header) → refresh the
// figures, debounced, whenever dataVersion moves.
//
// Every displayed number sits in its own element with
//   data-measure="<measure id>"  data-field="<dotted path in that measure's comparison JSON>"
//   data-format="<formatter name in format.js>"
// so a test can format the JSON value with formatByKind() and expect the element's text. Elements whose value
// comes from elsewhere say so with data-source="definition" (progress) or data-source="family" (the
// adjusted p-values of GET /v1/experiments/{id}/comparisons).

import {
  MISSING,
  formatByKind,
  formatCount,
  formatLevel,
  formatNumber,
  formatPExact,
} from './format.js';
import { dataVersionOf, readEventStream } from './sse.js';
import { equivalenceBlock, omnibusBlock } from './groups.js';
import { answersBlock } from './answers.js';
import { adjustedHeading, downloadsBlock, isoTime, primaryFirst, roleNote, sensitivityBlock, wantsDataRange } from './workbench.js';

const KEY_STORAGE = 'splitballot.readKey';
const REFRESH_DEBOUNCE_MS = 400;
/** Live updates are coalesced: at most one refresh every this many ms, however fast answers arrive. */
const REFRESH_MIN_INTERVAL_MS = 2000;
/** Replies remembered for conditional requests (JSON and SVG), the oldest dropped beyond this many. */
const REMEMBERED_MAX = 400;
const MAX_RECONNECT_MS = 30_000;
const LIVE_ON = 'Live: connected; the figures update as answers arrive.';

const $ = (id) => document.getElementById(id);
/** The key input, typed for editors that check this file. */
const keyInput = () => /** @type {HTMLInputElement} */ (document.getElementById('key-input'));

const state = {
  id: null,
  key: null,
  definition: null,
  pair: null, // { a, b } condition ids when the study has more than two conditions
  dataVersion: null,
  refreshTimer: null,
  refreshing: false,
  refreshAgain: false,
  live: null, // AbortController of the event-stream loop
  generation: 0, // bumps on every key change so stale responses are ignored
  familySize: 0, // comparisons in the adjusted family (0 when not loaded)
  familyInfo: null, // the family's adjustedFamily block (which comparisons were adjusted together)
  lastRefreshAt: 0, // when the last refresh started (Date.now())
  openTrajectories: new Set(), // measure ids whose trajectory chart the reader opened (fetched only then)
};

/**
 * The last 200 reply of every JSON and SVG URL with its ETag: a refresh asks again with If-None-Match and, on 304
 * (nothing changed; the service reads and computes nothing), uses the remembered body. Keyed by Accept and URL.
 */
const remembered = new Map();

// ---------------------------------------------------------------------------------------------------------
// Small DOM helpers
// ---------------------------------------------------------------------------------------------------------

/** Create an element: attrs may hold class, text, hidden and any attribute (data-*, aria-*); children are nodes or strings. */
function h(tag, attrs = {}, ...children) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k === 'class') el.className = v;
    else if (k === 'text') el.textContent = v;
    else if (k === 'hidden') el.hidden = true;
    else el.setAttribute(k, v === true ? '' : String(v));
  }
  for (const c of children.flat()) {
    if (c === null || c === undefined || c === false) continue;
    el.append(typeof c === 'string' ? document.createTextNode(c) : c);
  }
  return el;
}

/** " = 0.031" or " < 0.001" after an italic p (never "p = < 0.001"). */
function pIs(el) {
  // No-break spaces keep "p < 0.001" and "p = 0.03" on one line.
  return [(el.textContent || '').startsWith('<') ? '\u00a0' : '\u00a0=\u00a0', el];
}

/** One displayed number, marked for the browser test. */
function num(measure, field, kind, value, extra = {}) {
  /** @type {Record<string, string>} */
  const attrs = { class: `num num-${kind}`, 'data-field': field, 'data-format': kind, ...extra };
  if (measure !== null) attrs['data-measure'] = measure;
  if (kind === 'p' && typeof value === 'number') attrs.title = `p = ${formatPExact(value)}`;
  return h('span', attrs, formatByKind(kind, value));
}

function setStatus(text, tone = 'plain') {
  const el = $('page-status');
  el.textContent = text;
  el.dataset.tone = tone;
  el.hidden = text === '';
}

function readPathLocal(obj, path) {
  let cur = obj;
  for (const part of path.split('.')) {
    if (cur === null || cur === undefined || typeof cur !== 'object') return undefined;
    cur = cur[part];
  }
  return cur;
}

// ---------------------------------------------------------------------------------------------------------
// Key handling and HTTP
// ---------------------------------------------------------------------------------------------------------

let memoryKey = null; // fallback when sessionStorage is unavailable

function loadKey() {
  try {
    return sessionStorage.getItem(KEY_STORAGE);
  } catch {
    return memoryKey;
  }
}
function saveKey(key) {
  memoryKey = key;
  try {
    if (key === null) sessionStorage.removeItem(KEY_STORAGE);
    else sessionStorage.setItem(KEY_STORAGE, key);
  } catch {
    /* storage disabled: keep it in memory for this page only */
  }
}

class HttpError extends Error {
  constructor(status, problem) {
    super(problem && (problem.detail || problem.title) ? String(problem.detail || problem.title) : `HTTP ${status}`);
    this.status = status;
    this.problem = problem;
  }
}

const isAuthError = (err) => err instanceof HttpError && (err.status === 401 || err.status === 403);

async function api(path, accept = 'application/json', signal) {
  const conditional = accept === 'application/json' || accept === 'image/svg+xml';
  const id = `${accept} ${path}`;
  const last = conditional ? remembered.get(id) : undefined;
  /** @type {Record<string, string>} */
  const headers = { Authorization: `Bearer ${state.key}`, Accept: accept };
  if (last) headers['If-None-Match'] = last.etag;
  const res = await fetch(path, {
    headers,
    cache: conditional ? 'no-store' : 'no-cache', // JSON and SVG: revalidated here with the remembered ETag
    credentials: 'omit',
    signal,
  });
  if (res.status === 304 && last) {
    remembered.delete(id);
    remembered.set(id, last); // most recently used last
    return new Response(last.body, { status: 200, headers: { 'content-type': last.type } });
  }
  if (res.ok && conditional && res.headers.get('etag')) {
    const entry = { etag: /** @type {string} */ (res.headers.get('etag')), type: res.headers.get('content-type') || accept, body: await res.text() };
    remembered.delete(id);
    remembered.set(id, entry);
    while (remembered.size > REMEMBERED_MAX) remembered.delete(remembered.keys().next().value);
    return new Response(entry.body, { status: res.status, headers: { 'content-type': entry.type } });
  }
  if (!res.ok) {
    let problem = null;
    try {
      problem = await res.json();
    } catch {
      /* not JSON */
    }
    throw new HttpError(res.status, problem);
  }
  return res;
}

const base = () => `/v1/experiments/${encodeURIComponent(state.id)}`;

function pairQuery() {
  if (!state.pair) return '';
  return `?a=${encodeURIComponent(state.pair.a)}&b=${encodeURIComponent(state.pair.b)}`;
}

function showKeyPanel(message) {
  stopLive();
  $('key-panel').hidden = false;
  $('toolbar').hidden = true;
  $('progress').hidden = true;
  $('measures').replaceChildren();
  $('pair-picker-slot').replaceChildren();
  const err = $('key-error');
  if (message) {
    err.textContent = message;
    err.hidden = false;
    $('key-input').setAttribute('aria-invalid', 'true');
  } else {
    err.hidden = true;
    $('key-input').removeAttribute('aria-invalid');
  }
  setStatus('');
  keyInput().value = '';
  $('key-input').focus();
}

function onAuthFailure(err) {
  saveKey(null);
  state.key = null;
  state.generation++;
  remembered.clear();
  const why = err && err.status === 403 ? 'That key may not read this study' : 'That key was not accepted';
  showKeyPanel(`${why} (HTTP ${err ? err.status : 401}). Check that you copied the whole read key for this study, then try again.`);
}

// ---------------------------------------------------------------------------------------------------------
// SVG charts from the service
// ---------------------------------------------------------------------------------------------------------

const SVG_NS = 'http://www.w3.org/2000/svg';

/** Parse the service's SVG after a sanity check, drop anything active, and return a node for this document. */
function svgFromText(text) {
  const trimmed = text.trimStart();
  if (!trimmed.startsWith('<svg')) throw new Error('the chart response is not an SVG image');
  const doc = new DOMParser().parseFromString(trimmed, 'image/svg+xml');
  const root = doc.documentElement;
  if (!root || root.namespaceURI !== SVG_NS || root.localName !== 'svg' || doc.getElementsByTagName('parsererror').length > 0) {
    throw new Error('the chart could not be read as SVG');
  }
  for (const el of Array.from(root.querySelectorAll('script, foreignObject, style, iframe, use[href^="http"]'))) el.remove();
  for (const el of [root, ...Array.from(root.querySelectorAll('*'))]) {
    for (const attr of Array.from(el.attributes)) {
      const name = attr.name.toLowerCase();
      const value = attr.value.trim().toLowerCase();
      if (name.startsWith('on') || name === 'style' || ((name === 'href' || name === 'xlink:href') && !value.startsWith('#'))) {
        el.removeAttribute(attr.name);
      }
    }
  }
  return document.importNode(root, true);
}

async function fetchSvg(path) {
  const res = await api(path, 'image/svg+xml');
  return svgFromText(await res.text());
}

function chartFigure(kind, caption, svgResult) {
  const box = h('div', { class: `chart-box chart-${kind}` });
  const fig = h('figure', { class: `chart-figure figure-${kind}` }, box);
  if (svgResult.svg) {
    box.append(svgResult.svg);
    const desc = svgResult.svg.querySelector('desc');
    if (desc && desc.textContent) {
      fig.append(h('details', { class: 'chart-words' }, h('summary', { text: 'This chart in words' }), h('p', { text: desc.textContent })));
    }
  } else {
    box.append(h('p', { class: 'chart-missing', text: svgResult.error }));
  }
  fig.prepend(h('figcaption', { class: 'chart-caption', text: caption }));
  return fig;
}

async function loadSvg(path) {
  try {
    return { svg: await fetchSvg(path) };
  } catch (err) {
    if (isAuthError(err)) throw err;
    return { svg: null, error: err instanceof HttpError && err.status === 404 ? 'No chart yet.' : `The chart could not be loaded (${err.message}).` };
  }
}

// ---------------------------------------------------------------------------------------------------------
// Definition helpers (tolerant of the exact shape)
// ---------------------------------------------------------------------------------------------------------

function measureScale(m) {
  const s = m.scale && typeof m.scale === 'object' ? m.scale : m;
  return { min: s.min, max: s.max, integer: Boolean(s.integer) };
}

function conditionLabel(id) {
  const c = (state.definition.conditions || []).find((x) => x.id === id);
  return c ? c.label || c.id : id;
}

/** Answers so far per condition, read from the definition's counts (object or array) or the conditions. */
function countFor(def, conditionId) {
  const pick = (v) => {
    if (typeof v === 'number') return v;
    if (v && typeof v === 'object') {
      for (const k of ['n', 'count', 'responses', 'answers']) if (typeof v[k] === 'number') return v[k];
    }
    return null;
  };
  let counts = def.counts ?? def.countsPerCondition ?? def.responseCounts ?? null;
  // The service answers counts: { responses, excluded, byCondition: [{ condition, responses, excluded }] }.
  if (counts && typeof counts === 'object' && Array.isArray(counts.byCondition)) counts = counts.byCondition;
  if (Array.isArray(counts)) {
    const entry = counts.find((e) => e && (e.condition === conditionId || e.id === conditionId));
    if (entry) return pick(entry);
  } else if (counts && typeof counts === 'object') {
    const v = pick(counts[conditionId]);
    if (v !== null) return v;
  }
  const cond = (def.conditions || []).find((c) => c.id === conditionId);
  return cond ? pick(cond) : null;
}

function plannedFor(def, conditionId) {
  const p = def.plannedPerCondition;
  if (typeof p === 'number') return p;
  if (p && typeof p === 'object' && typeof p[conditionId] === 'number') return p[conditionId];
  return null;
}

// ---------------------------------------------------------------------------------------------------------
// Rendering
// ---------------------------------------------------------------------------------------------------------

function renderHeader(def) {
  const title = def.title || def.id;
  $('study-title').textContent = title;
  document.title = `${title} · results · Splitballot`;
  const parts = [];
  if (def.status) parts.push(h('span', { class: `badge badge-${String(def.status).replace(/[^a-z-]/gi, '')}`, text: String(def.status) }));
  parts.push(h('span', { class: 'meta-item' }, 'Study ', h('code', { text: def.id })));
  parts.push(
    h('span', { class: 'meta-item' }, `${(def.conditions || []).length} conditions · ${(def.measures || []).length} ${(def.measures || []).length === 1 ? 'item' : 'items'}`),
  );
  if (state.dataVersion !== null) parts.push(h('span', { class: 'meta-item' }, 'data version ', h('span', { 'data-field': 'dataVersion', text: String(state.dataVersion) })));
  $('study-meta').replaceChildren(...parts);
}

function renderProgress(def) {
  const list = $('progress-list');
  const items = (def.conditions || []).map((c) => {
    const n = countFor(def, c.id);
    const planned = plannedFor(def, c.id);
    const labelId = `progress-label-${c.id}`.replace(/[^A-Za-z0-9_-]/g, '-');
    const attrs = { 'data-source': 'definition', 'data-condition': c.id };
    const value = n === null ? null : n;
    const text =
      planned !== null
        ? [num(null, 'count', 'count', value, attrs), ' of ', num(null, 'planned', 'count', planned, attrs), ' planned (', num(null, 'fraction', 'percent', value === null ? null : value / planned, attrs), ')']
        : [num(null, 'count', 'count', value, attrs), ' answers (no planned size)'];
    const bar =
      planned !== null && value !== null
        ? h('progress', { max: String(planned), value: String(Math.min(value, planned)), 'aria-labelledby': labelId, class: value >= planned ? 'complete' : '' })
        : null;
    return h('li', { class: 'progress-item' }, h('span', { class: 'progress-label', id: labelId, text: c.label || c.id }), bar, h('span', { class: 'progress-text' }, ...text));
  });
  list.replaceChildren(...items);
  $('progress').hidden = items.length === 0;
}

function renderPairPicker(def) {
  const slot = $('pair-picker-slot');
  const conditions = def.conditions || [];
  if (conditions.length <= 2) {
    state.pair = null;
    slot.replaceChildren();
    return;
  }
  if (!state.pair) state.pair = { a: conditions[0].id, b: conditions[1].id };
  if (slot.firstChild) return;
  const select = (name, label, value) =>
    h(
      'label',
      { class: 'pair-field' },
      label,
      h('select', { name }, ...conditions.map((c) => h('option', { value: c.id, selected: c.id === value ? true : null, text: c.label || c.id }))),
    );
  const form = h(
    'form',
    { class: 'panel pair-picker', 'aria-label': 'Choose the two conditions to compare' },
    h('p', { class: 'pair-title', text: 'This study has more than two conditions. Compare' }),
    select('a', 'first (a) ', state.pair.a),
    select('b', ' with (b) ', state.pair.b),
    h('button', { type: 'submit', text: 'Compare' }),
    h('p', { class: 'form-error', role: 'alert', hidden: true }),
  );
  form.addEventListener('submit', (ev) => {
    ev.preventDefault();
    const a = form.elements.namedItem('a').value;
    const b = form.elements.namedItem('b').value;
    const err = form.querySelector('.form-error');
    if (a === b) {
      err.textContent = 'Choose two different conditions.';
      err.hidden = false;
      return;
    }
    err.hidden = true;
    state.pair = { a, b };
    refreshNow();
  });
  slot.replaceChildren(form);
}

function scaleText(scale) {
  return `${formatNumber(scale.min)} to ${formatNumber(scale.max)}${scale.integer ? ', whole numbers' : ''}`;
}

function reasonsOf(cmp) {
  const out = [];
  const add = (label, obj) => {
    if (obj && typeof obj.reason === 'string' && obj.reason) out.push(`${label}: ${obj.reason}`);
  };
  add(`${conditionLabel(cmp.a)}`, cmp.groups && cmp.groups.a);
  add(`${conditionLabel(cmp.b)}`, cmp.groups && cmp.groups.b);
  add("Welch's t-test", cmp.welch);
  add('Student t-test', cmp.student);
  add('Rank-sum test', cmp.mannWhitney);
  add('Hodges–Lehmann shift', cmp.hodgesLehmann);
  add('Effect sizes', cmp.effectSizes);
  return out;
}

function comparisonTable(mid, cmp) {
  const g = cmp.groups || { a: {}, b: {} };
  const la = conditionLabel(cmp.a);
  const lb = conditionLabel(cmp.b);
  const n = (field, kind, extra) => num(mid, field, kind, readPathLocal(cmp, field), extra);
  const level = readPathLocal(cmp, 'welch.ci.level');
  const line = (...parts) => h('span', { class: 'line' }, ...parts);

  const diffLabel = 'Difference a − b and test';
  const meanDiff = h(
    'td',
    { class: 'diff', 'data-label': diffLabel },
    line(h('span', { class: 'term', text: 'Mean difference ' }), n('welch.meanDifference', 'number'), ', ', num(mid, 'welch.ci.level', 'level', level), ' CI ', n('welch.ci', 'interval')),
    line(h('span', { class: 'term', text: "Welch's t-test " }), 't = ', n('welch.t', 'number'), ', df = ', n('welch.df', 'number'), ', ', h('em', { text: 'p' }), ...pIs(n('welch.p', 'p'))),
    line(h('span', { class: 'term term-secondary', text: 'Student t-test (pooled) ' }), h('em', { text: 'p' }), ...pIs(n('student.p', 'p'))),
  );

  const hlLevel = readPathLocal(cmp, 'hodgesLehmann.ci.level');
  const achieved = readPathLocal(cmp, 'hodgesLehmann.ci.achievedLevel');
  const showAchieved = typeof achieved === 'number' && typeof hlLevel === 'number' && Math.abs(achieved - hlLevel) > 5e-4;
  const mw = cmp.mannWhitney || {};
  const mwMethod =
    mw.method === 'exact'
      ? 'exact'
      : `normal approximation${mw.continuityCorrection ? ', continuity correction' : ''}${mw.tieCorrection ? ', tie correction' : ''}`;
  const medianDiff = h(
    'td',
    { class: 'diff', 'data-label': diffLabel },
    line(
      h('span', { class: 'term', text: 'Hodges–Lehmann shift ' }),
      n('hodgesLehmann.estimate', 'number'),
      ', ',
      num(mid, 'hodgesLehmann.ci.level', 'level', hlLevel),
      ' CI ',
      n('hodgesLehmann.ci', 'interval'),
      showAchieved ? h('span', { class: 'achieved' }, ' (achieved level ', n('hodgesLehmann.ci.achievedLevel', 'level'), ')') : null,
    ),
    line(
      h('span', { class: 'term', text: 'Rank-sum test (Mann–Whitney) ' }),
      h('em', { text: 'U' }),
      ' = ',
      n('mannWhitney.u', 'number'),
      ', ',
      h('em', { text: 'p' }),
      ...pIs(n('mannWhitney.p', 'p')),
    ),
    line(h('span', { class: 'term-secondary', text: mwMethod })),
  );

  const cellLabel = (key) => `${key} · ${key === 'a' ? la : lb}`;
  const group = (key) => [
    h('td', { class: 'grp', 'data-label': cellLabel(key) }, h('span', { class: 'cell-value' }, n(`groups.${key}.mean`, 'number'), ' (', n(`groups.${key}.sd`, 'number'), ')')),
  ];
  const groupMedian = (key) => [
    h(
      'td',
      { class: 'grp', 'data-label': cellLabel(key) },
      h('span', { class: 'cell-value' }, n(`groups.${key}.median`, 'number'), h('span', { class: 'iqr' }, ' (', n(`groups.${key}.q1`, 'number'), ' to ', n(`groups.${key}.q3`, 'number'), ')')),
    ),
  ];

  const table = h(
    'table',
    { class: 'comparison' },
    h('caption', { class: 'visually-hidden', text: `Both tests for ${la} compared with ${lb}` }),
    h(
      'thead',
      {},
      h(
        'tr',
        {},
        h('td', {}),
        h('th', { scope: 'col' }, h('span', { class: 'col-key', text: 'a' }), ' ', la),
        h('th', { scope: 'col' }, h('span', { class: 'col-key', text: 'b' }), ' ', lb),
        h('th', { scope: 'col', text: 'Difference a − b and test' }),
      ),
    ),
    h(
      'tbody',
      {},
      h('tr', { class: 'row-n' }, h('th', { scope: 'row', text: 'Answers (n)' }), h('td', { class: 'grp', 'data-label': cellLabel('a') }, n('groups.a.n', 'count')), h('td', { class: 'grp', 'data-label': cellLabel('b') }, n('groups.b.n', 'count')), h('td', { class: 'diff empty' })),
      h('tr', { class: 'row-mean' }, h('th', { scope: 'row' }, 'Mean ', h('span', { class: 'unit', text: '(SD)' })), ...group('a'), ...group('b'), meanDiff),
      h('tr', { class: 'row-median' }, h('th', { scope: 'row' }, 'Median ', h('span', { class: 'unit', text: '(Q1 to Q3)' })), ...groupMedian('a'), ...groupMedian('b'), medianDiff),
    ),
  );
  return h('div', { class: 'table-scroll', role: 'region', 'aria-label': `Comparison table for ${la} and ${lb} (scrolls sideways)`, tabindex: '0' }, table);
}

function effectList(mid, cmp) {
  const n = (field, kind) => num(mid, field, kind, readPathLocal(cmp, field));
  const item = (term, help, ...value) => [h('dt', {}, term, help ? h('span', { class: 'help', text: help }) : null), h('dd', {}, ...value)];
  return h(
    'dl',
    { class: 'facts effects' },
    ...item("Hedges' g", 'mean difference in pooled SDs, small-sample corrected', n('effectSizes.hedgesG', 'number'), ' ', n('effectSizes.hedgesGCi', 'interval')),
    ...item("Cohen's d", null, n('effectSizes.cohensD', 'number')),
    ...item('Rank-biserial r', 'from −1 to 1; 0 means no tendency', n('effectSizes.rankBiserial', 'number')),
    ...item('P(a > b)', 'chance an answer in a beats one in b (ties count half)', n('effectSizes.probabilityOfSuperiority', 'number')),
  );
}

function robustList(mid, cmp) {
  const n = (field, kind) => num(mid, field, kind, readPathLocal(cmp, field));
  const trim = readPathLocal(cmp, 'robust.yuenWelch.trim');
  return h(
    'dl',
    { class: 'facts robust' },
    h('dt', {}, 'Brunner–Munzel test', h('span', { class: 'help', text: 'rank test that allows unequal spreads' })),
    h('dd', {}, h('em', { text: 'p' }), ...pIs(n('robust.brunnerMunzel.p', 'p'))),
    h('dt', {}, `Yuen's trimmed means${typeof trim === 'number' ? ` (${formatLevel(trim)} trimmed)` : ''}`),
    h('dd', {}, 'difference ', n('robust.yuenWelch.difference', 'number'), ', ', h('em', { text: 'p' }), ...pIs(n('robust.yuenWelch.p', 'p'))),
  );
}

function flagList(cmp) {
  const flags = Array.isArray(cmp.flags) ? [...cmp.flags] : [];
  flags.sort((x, y) => (x.severity === y.severity ? 0 : x.severity === 'warning' ? -1 : 1));
  if (flags.length === 0) return h('p', { class: 'no-flags', text: 'No quality flags: nothing unusual was seen in these answers.' });
  return h(
    'ul',
    { class: 'flags' },
    ...flags.map((f) => {
      const warning = f.severity === 'warning';
      return h(
        'li',
        { class: `flag flag-${warning ? 'warning' : 'info'}`, 'data-code': f.code, 'data-severity': warning ? 'warning' : 'info' },
        h('span', { class: 'flag-mark', 'aria-hidden': 'true', text: warning ? '!' : 'i' }),
        h('span', { class: 'flag-body' }, h('strong', { class: 'flag-kind', text: warning ? 'Warning: ' : 'Note: ' }), f.message || f.code),
      );
    }),
  );
}

function formatWhen(iso) {
  if (typeof iso !== 'string') return MISSING;
  return isoTime(iso);
}

const TRAJECTORY_CAPTION = 'How the estimate and its anytime-valid interval developed as answers arrived';

/**
 * The trajectory chart, folded: it is fetched only when the reader opens it (the service computes a trajectory in
 * O(answers)), and again on each refresh only while it stays open (a conditional request: 304 when unchanged).
 */
function trajectoryDetails(mid, trajectory) {
  const open = state.openTrajectories.has(mid);
  const details = h('details', { class: 'trajectory-details', open }, h('summary', { text: 'Show how the estimate developed as answers arrived (chart)' }));
  if (open && trajectory) details.append(chartFigure('trajectory', TRAJECTORY_CAPTION, trajectory));
  details.addEventListener('toggle', async () => {
    if (!details.open) {
      state.openTrajectories.delete(mid);
      return;
    }
    state.openTrajectories.add(mid);
    if (details.querySelector('figure')) return;
    const generation = state.generation;
    const loaded = await loadSvg(trajectoryPath(mid)).catch((err) => {
      if (isAuthError(err)) onAuthFailure(err);
      return null;
    });
    if (!loaded || generation !== state.generation || details.querySelector('figure')) return;
    details.append(chartFigure('trajectory', TRAJECTORY_CAPTION, loaded));
  });
  return details;
}

function trajectoryPath(mid) {
  return `${base()}/comparisons/${encodeURIComponent(mid)}/trajectory.svg${pairQuery()}`;
}

function interimBlock(mid, cmp, trajectory) {
  const mon = cmp.monitoring;
  const heading = h('h3', { text: 'Interim monitoring' });
  if (!mon) {
    return h('section', { class: 'interim' }, heading, h('p', { class: 'muted', text: 'No interim monitoring is available for this comparison yet.' }));
  }
  const parts = [heading];
  const av = mon.anytimeValid;
  if (av) {
    const n = (field, kind) => num(mid, field, kind, readPathLocal(cmp, field));
    parts.push(
      h(
        'dl',
        { class: 'facts interim-facts' },
        h('dt', {}, 'Anytime-valid ', h('em', { text: 'p' }), h('span', { class: 'help', text: 'may be checked after every answer' })),
        h('dd', {}, n('monitoring.anytimeValid.p', 'p')),
        h('dt', {}, 'Anytime-valid interval for a − b', h('span', { class: 'help', text: 'a confidence sequence: valid at every look' })),
        h('dd', {}, n('monitoring.anytimeValid.ci.level', 'level'), ' ', n('monitoring.anytimeValid.ci', 'interval')),
      ),
    );
    if (av.reason) parts.push(h('p', { class: 'muted', text: av.reason }));
    if (av.method) parts.push(h('p', { class: 'method', text: `Method: ${av.method}.` }));
    parts.push(trajectoryDetails(mid, trajectory));
  } else {
    parts.push(h('p', { class: 'muted', text: 'The anytime-valid p-value is not available for this comparison.' }));
  }
  const gs = mon.groupSequential;
  if (gs && Array.isArray(gs.looks)) {
    parts.push(h('h4', { text: `Planned looks (${gs.spending === 'pocock' ? 'Pocock' : "O'Brien–Fleming"}-type boundaries)` }));
    if (gs.looks.length === 0) parts.push(h('p', { class: 'muted', text: 'No interim look has been recorded yet.' }));
    else {
      const rows = gs.looks.map((look, i) => {
        const p = (field, kind) => num(mid, `monitoring.groupSequential.looks.${i}.${field}`, kind, look[field]);
        return h(
          'tr',
          { class: look.crossed ? 'crossed' : '' },
          h('th', { scope: 'row', text: String(look.number ?? i + 1) }),
          h('td', {}, p('fraction', 'percent')),
          h('td', {}, p('boundaryZ', 'z')),
          h('td', {}, p('observedZ', 'z')),
          h('td', { class: 'crossed-cell' }, look.crossed ? h('strong', { text: 'Yes, stop' }) : 'No'),
          h('td', { text: formatWhen(look.recordedAt) }),
        );
      });
      parts.push(
        h(
          'div',
          { class: 'table-scroll', role: 'region', 'aria-label': 'Planned looks (scrolls sideways)', tabindex: '0' },
          h(
            'table',
            { class: 'looks' },
            h('caption', { class: 'visually-hidden', text: 'Recorded interim looks with their boundaries' }),
            h(
              'thead',
              {},
              h('tr', {}, ...['Look', 'Share of planned answers', 'Boundary |z|', 'Observed z', 'Crossed?', 'Recorded'].map((t) => h('th', { scope: 'col', text: t }))),
            ),
            h('tbody', {}, ...rows),
          ),
        ),
      );
    }
  }
  if (mon.caveat) parts.push(h('p', { class: 'caveat', text: mon.caveat }));
  return h('section', { class: 'interim' }, ...parts);
}

function adjustedLine(mid, entry) {
  if (!entry || !entry.adjusted) return null;
  const adj = entry.adjusted;
  const method = adj.method === 'bh' ? 'Benjamini–Hochberg' : adj.method === 'holm' ? 'Holm' : String(adj.method || 'adjusted');
  const attrs = { 'data-source': 'family' };
  if (adj.welchP === null && adj.mannWhitneyP === null && adj.reason) return h('p', { class: 'adjusted adjusted-none', text: adj.reason });
  return h(
    'p',
    { class: 'adjusted' },
    h('strong', { text: adjustedHeading(entry, state.familyInfo) || `Adjusted for all ${state.familySize} comparisons (${method}): ` }),
    "Welch ", h('em', { text: 'p' }), ...pIs(num(mid, 'adjusted.welchP', 'p', adj.welchP, attrs)),
    ', rank-sum ', h('em', { text: 'p' }), ...pIs(num(mid, 'adjusted.mannWhitneyP', 'p', adj.mannWhitneyP, attrs)),
  );
}

function renderMeasure(m, result) {
  const mid = m.id;
  const scale = measureScale(m);
  const headingId = `measure-heading-${mid}`.replace(/[^A-Za-z0-9_-]/g, '-');
  const section = h('section', { class: 'measure panel', id: `measure-${mid}`.replace(/[^A-Za-z0-9_-]/g, '-'), 'data-measure': mid, 'aria-labelledby': headingId });
  section.append(
    h(
      'header',
      { class: 'measure-head' },
      h('h2', { id: headingId, text: m.label || m.id }),
      h('p', { class: 'scale' }, `Scale ${scaleText(scale)}`, m.required === false ? ' · optional item' : ''),
      roleNote(h, state.definition || {}, m),
    ),
  );
  if (result.error) {
    section.append(h('p', { class: 'load-error', role: 'alert', text: result.error }));
    return section;
  }
  const cmp = result.cmp;
  section.dataset.dataVersion = String(cmp.dataVersion ?? '');
  const body = h(
    'div',
    { class: 'measure-body' },
    h(
      'div',
      { class: 'charts' },
      chartFigure('distribution', `Answers by condition: box, median, mean and every answer`, result.chart),
      result.dataChart ? chartFigure('distribution-data', "Zoomed to the answers' range: the axis does not span the whole scale", result.dataChart) : null,
    ),
    h(
      'div',
      { class: 'numbers' },
      h('h3', { class: 'numbers-title', text: 'Both tests side by side' }),
      comparisonTable(mid, cmp),
      adjustedLine(mid, result.family),
      h('h4', { text: 'Effect sizes' }),
      effectList(mid, cmp),
      h('h4', { text: 'Robust checks' }),
      robustList(mid, cmp),
      ...surveyBlocks(mid, cmp),
    ),
  );
  section.append(body);
  const equivalence = equivalenceBlock(groupsUi(), mid, cmp);
  if (equivalence) body.querySelector('.numbers').append(equivalence);
  if (result.omnibus) section.insertBefore(omnibusBlock(groupsUi(), mid, result.omnibus, result.omnibusChart), body);
  const reasons = reasonsOf(cmp);
  if (reasons.length > 0) {
    section.append(h('div', { class: 'reasons' }, h('h4', { text: 'Why some numbers are missing' }), h('ul', {}, ...reasons.map((r) => h('li', { text: r })))));
  }
  const answersCtx = { h, studyId: state.id, key: () => state.key, conditionLabel, onChanged: refreshNow };
  section.append(h('section', { class: 'flags-block' }, h('h3', { text: 'Points to keep in mind' }), flagList(cmp), answersBlock(answersCtx, mid, cmp)));
  section.append(sensitivityBlock(h, (field, kind, value) => num(mid, field, kind, value), cmp));
  section.append(interimBlock(mid, cmp, result.trajectory));
  section.append(
    h(
      'p',
      { class: 'computed' },
      'Data version ',
      h('span', { 'data-measure': mid, 'data-field': 'dataVersion', 'data-format': 'count', text: formatCount(cmp.dataVersion) }),
      ` · computed ${formatWhen(cmp.computedAt)}`,
    ),
  );
  return section;
}

// ---------------------------------------------------------------------------------------------------------
// Survey weights and covariates (the `weighted` and `adjusted` blocks of a comparison)
// ---------------------------------------------------------------------------------------------------------

/** The measures compared on the page: every measure not declared as a covariate. */
function outcomeMeasures(def) {
  return (def.measures || []).filter((m) => m.role !== 'covariate');
}

/** The study's covariates (asked before the split), listed apart. */
function covariateIds() {
  const def = state.definition;
  return def ? (def.measures || []).filter((m) => m.role === 'covariate').map((m) => m.id) : [];
}

/** `covariates=…` added to a comparison query when the study declares covariates ("" otherwise). */
function covariateQuery(q) {
  const ids = covariateIds();
  if (ids.length === 0) return '';
  return `${q ? '&' : '?'}covariates=${ids.map(encodeURIComponent).join(',')}`;
}

/** The weighted and the adjusted blocks of one comparison, when the reply has them. */
function surveyBlocks(mid, cmp) {
  return [weightedSection(mid, cmp), adjustedSection(mid, cmp)].filter((x) => x !== null);
}

function weightedSection(mid, cmp) {
  const w = cmp.weighted;
  if (!w) return null;
  const n = (field, kind) => num(mid, field, kind, readPathLocal(cmp, field));
  const la = conditionLabel(cmp.a);
  const lb = conditionLabel(cmp.b);
  const group = (key, label) =>
    h(
      'tr',
      {},
      h('th', { scope: 'row', text: label }),
      h('td', {}, n(`weighted.groups.${key}.mean`, 'number')),
      h('td', {}, n(`weighted.groups.${key}.sd`, 'number')),
      h('td', {}, n(`weighted.groups.${key}.median`, 'number'), ' (', n(`weighted.groups.${key}.q1`, 'number'), '–', n(`weighted.groups.${key}.q3`, 'number'), ')'),
      h('td', {}, n(`weighted.groups.${key}.n`, 'count'), ' (effective ', n(`weighted.groups.${key}.effectiveN`, 'number'), ')'),
    );
  const left = (w.groups.a.withoutWeight || 0) + (w.groups.b.withoutWeight || 0);
  return h(
    'section',
    { class: 'weighted-block' },
    h('h4', { text: 'With survey weights' }),
    h(
      'p',
      { class: 'muted' },
      'These numbers estimate the population the weights stand for, not only the people who answered; the flags below say when weighting changes the conclusion.',
    ),
    h(
      'div',
      { class: 'table-scroll', tabindex: '0' },
      h(
        'table',
        { class: 'weighted-table' },
        h('thead', {}, h('tr', {}, h('th', { scope: 'col', text: 'Condition' }), h('th', { scope: 'col', text: 'Weighted mean' }), h('th', { scope: 'col', text: 'SD' }), h('th', { scope: 'col', text: 'Median (quartiles)' }), h('th', { scope: 'col', text: 'Answers' }))),
        h('tbody', {}, group('a', la), group('b', lb)),
      ),
    ),
    h(
      'p',
      { class: 'line' },
      h('span', { class: 'term', text: 'Weighted mean difference ' }),
      n('weighted.tTest.meanDifference', 'number'), ', ', n('weighted.tTest.ci.level', 'level'), ' CI ', n('weighted.tTest.ci', 'interval'),
      '; design-based t = ', n('weighted.tTest.t', 'number'), ', df = ', n('weighted.tTest.df', 'number'), ', ', h('em', { text: 'p' }), ...pIs(n('weighted.tTest.p', 'p')),
    ),
    h(
      'p',
      { class: 'line' },
      h('span', { class: 'term', text: 'Design-based rank test ' }),
      'difference in mean rank score ', n('weighted.rankTest.estimate', 'number'), ', ', h('em', { text: 'p' }), ...pIs(n('weighted.rankTest.p', 'p')),
    ),
    left > 0 ? h('p', { class: 'muted', text: `${formatCount(left)} answers without a weight are left out of these numbers.` }) : null,
    h('p', { class: 'muted', text: w.monitoring }),
  );
}

function adjustedSection(mid, cmp) {
  const adj = cmp.adjusted;
  if (!adj) return null;
  const n = (field, kind) => num(mid, field, kind, readPathLocal(cmp, field));
  const row = (label, key) =>
    h(
      'tr',
      {},
      h('th', { scope: 'row', text: label }),
      h('td', {}, n(`adjusted.${key}.estimate`, 'number')),
      h('td', {}, n(`adjusted.${key}.ci`, 'interval')),
      h('td', {}, n(`adjusted.${key}.se`, 'number')),
      h('td', {}, h('em', { text: 'p' }), ...pIs(n(`adjusted.${key}.p`, 'p'))),
    );
  const dropped = adj.missing && adj.missing.droppedRows > 0 ? ` ${formatCount(adj.missing.droppedRows)} answers with a covariate missing are left out of both.` : '';
  return h(
    'section',
    { class: 'adjusted-block' },
    h('h4', { text: `Adjusted for ${adj.covariates.join(', ')}` }),
    h(
      'div',
      { class: 'table-scroll', tabindex: '0' },
      h(
        'table',
        { class: 'adjusted-table' },
        h('thead', {}, h('tr', {}, h('th', { scope: 'col', text: 'Difference a − b' }), h('th', { scope: 'col', text: 'Estimate' }), h('th', { scope: 'col', text: 'Interval' }), h('th', { scope: 'col', text: 'Standard error (HC2)' }), h('th', { scope: 'col', text: 'Test' }))),
        h('tbody', {}, row('Unadjusted', 'unadjusted'), row('Adjusted', 'adjusted')),
      ),
    ),
    h('p', {}, 'Adjustment narrowed the interval by ', n('adjusted.narrowingPercent', 'number'), ' %, on ', n('adjusted.n', 'count'), ' answers.', dropped),
    h(
      'p',
      { class: 'muted' },
      'Adjusting for answers given before the split removes noise they explain, so the estimate is usually more precise; it does not remove bias, and it cannot rescue a comparison whose conditions were not randomly assigned.',
    ),
  );
}

/** The covariates, listed apart from the compared items. */
function covariateSection(def) {
  const cov = (def.measures || []).filter((m) => m.role === 'covariate');
  if (cov.length === 0) return [];
  return [
    h(
      'section',
      { class: 'covariates panel', id: 'covariates' },
      h('h2', { text: 'Asked before the split (covariates)' }),
      h('p', { class: 'muted', text: 'These questions came before the conditions differed; they are used to adjust the comparisons above, not compared themselves.' }),
      h('ul', {}, ...cov.map((m) => h('li', { 'data-covariate': m.id }, `${m.label || m.id} (scale ${scaleText(measureScale(m))})`))),
    ),
  ];
}

// ---------------------------------------------------------------------------------------------------------
// Loading
// ---------------------------------------------------------------------------------------------------------

async function loadMeasure(m) {
  const path = `${base()}/comparisons/${encodeURIComponent(m.id)}`;
  const q = pairQuery();
  let cmp;
  try {
    cmp = await (await api(path + q + covariateQuery(q))).json();
  } catch (err) {
    if (isAuthError(err)) throw err;
    return { error: `This comparison could not be loaded: ${err.message}` };
  }
  const [chart, trajectory, omnibus, dataChart] = await Promise.all([
    loadSvg(`${path}/chart.svg${q}`),
    cmp.monitoring && cmp.monitoring.anytimeValid && state.openTrajectories.has(m.id) ? loadSvg(`${path}/trajectory.svg${q}`) : Promise.resolve(null),
    loadOmnibus(path),
    wantsDataRange(m, cmp) ? loadSvg(`${path}/chart.svg${q ? `${q}&` : '?'}range=data`) : Promise.resolve(null),
  ]);
  return { cmp, chart, trajectory, dataChart, ...omnibus };
}

/** The helpers the omnibus and equivalence blocks (groups.js) build with. */
function groupsUi() {
  return { h, num, pIs, chartFigure, flagList, conditionLabel };
}

/** With three or more conditions: the omnibus JSON and the chart of every condition (the block is left out when they fail). */
async function loadOmnibus(path) {
  if ((state.definition.conditions || []).length < 3) return {};
  try {
    const [omnibus, omnibusChart] = await Promise.all([(await api(`${path}/omnibus`)).json(), loadSvg(`${path}/omnibus/chart.svg`)]);
    return { omnibus, omnibusChart };
  } catch (err) {
    if (isAuthError(err)) throw err;
    return {};
  }
}

/** Adjusted p-values across the family (only meaningful with several items or pairs); null when unavailable. */
async function loadFamily(def) {
  if (outcomeMeasures(def).length < 2) return null;
  try {
    // With more than two conditions the family is every pair (the route takes no a/b; the entry of the chosen pair is picked below).
    const body = await (await api(`${base()}/comparisons?pairs=${state.pair ? 'all' : 'first'}&adjust=holm`)).json();
    state.familyInfo = body && body.adjustedFamily ? body.adjustedFamily : null;
    const entries = Array.isArray(body) ? body : body.comparisons || body.items || body.results || [];
    return Array.isArray(entries) ? entries : null;
  } catch (err) {
    if (isAuthError(err)) throw err;
    return null;
  }
}

async function refresh() {
  if (!state.key) return;
  if (state.refreshing) {
    state.refreshAgain = true;
    return;
  }
  state.refreshing = true;
  state.lastRefreshAt = Date.now();
  const generation = state.generation;
  const first = state.definition === null;
  if (first) setStatus('Loading the study…');
  try {
    const def = await (await api(base())).json();
    if (generation !== state.generation) return;
    state.definition = def;
    renderPairPicker(def);
    const measures = primaryFirst(outcomeMeasures(def));
    const [results, family] = await Promise.all([Promise.all(measures.map(loadMeasure)), loadFamily(def)]);
    if (generation !== state.generation) return;
    const versions = results.map((r) => (r.cmp && typeof r.cmp.dataVersion === 'number' ? r.cmp.dataVersion : null)).filter((v) => v !== null);
    if (typeof def.dataVersion === 'number') versions.push(def.dataVersion);
    if (versions.length > 0) state.dataVersion = Math.max(...versions);
    state.familySize = family ? family.length : 0;

    $('key-panel').hidden = true;
    $('toolbar').hidden = false;
    if (!$('downloads')) $('toolbar').after(downloadsBlock(h, state.id, base(), api));
    renderHeader(def);
    renderProgress(def);
    // Keep keyboard focus where it was when a live refresh swaps the numbers.
    const active = document.activeElement;
    const focusKey = active && active.closest && active.closest('.measure') ? active.closest('.measure').id : null;
    const sections = measures.map((m, i) => {
      const entry = family ? family.find((e) => e && e.measure === m.id && (!state.pair || (e.a === state.pair.a && e.b === state.pair.b))) : null;
      return renderMeasure(m, { ...results[i], family: entry });
    });
    $('measures').replaceChildren(...sections, ...covariateSection(def));
    if (focusKey) {
      const again = document.getElementById(focusKey);
      const target = again && /** @type {HTMLElement | null} */ (again.querySelector('.table-scroll'));
      if (target) target.focus({ preventScroll: true });
    }
    if ($('live-status').dataset.tone === 'busy') setLive(LIVE_ON, 'on');
    if (measures.length === 0) setStatus('This study has no items yet.');
    else setStatus('');
    if (first) {
      $('study-title').focus({ preventScroll: true });
      startLive();
    }
  } catch (err) {
    if (generation !== state.generation) return;
    if (isAuthError(err)) onAuthFailure(err);
    else if (err instanceof HttpError && err.status === 404) setStatus(`There is no study with the id "${state.id}".`, 'error');
    else setStatus(`The results could not be loaded: ${err.message}. Try "Refresh now" in a moment.`, 'error');
    if (first) state.definition = null;
  } finally {
    state.refreshing = false;
    if (state.refreshAgain && state.key) {
      state.refreshAgain = false;
      scheduleRefresh();
    }
  }
}

/**
 * Coalesce live changes: while a refresh is pending every further change joins it, and refreshes start at most once
 * every REFRESH_MIN_INTERVAL_MS (so answers arriving several times a second cost one refresh every 2 s).
 */
function scheduleRefresh() {
  if (state.refreshTimer !== null) return;
  const wait = Math.max(REFRESH_DEBOUNCE_MS, state.lastRefreshAt + REFRESH_MIN_INTERVAL_MS - Date.now());
  state.refreshTimer = setTimeout(() => {
    state.refreshTimer = null;
    refresh();
  }, wait);
}

function refreshNow() {
  clearTimeout(state.refreshTimer);
  state.refreshTimer = null;
  refresh();
}

// ---------------------------------------------------------------------------------------------------------
// Live updates
// ---------------------------------------------------------------------------------------------------------

function setLive(text, tone) {
  const el = $('live-status');
  el.textContent = text;
  el.dataset.tone = tone;
}

function stopLive() {
  if (state.live) state.live.abort();
  state.live = null;
}

function sleep(ms, signal) {
  return new Promise((/** @type {(value?: unknown) => void} */ resolve) => {
    const t = setTimeout(resolve, ms);
    signal.addEventListener('abort', () => {
      clearTimeout(t);
      resolve();
    }, { once: true });
  });
}

function onDataVersion(version) {
  if (state.dataVersion === null || version !== state.dataVersion) {
    setLive(`Live: new answers (data version ${version}), updating…`, 'busy');
    scheduleRefresh();
  }
}

async function startLive() {
  stopLive();
  const controller = new AbortController();
  state.live = controller;
  const { signal } = controller;
  let failures = 0;
  while (!signal.aborted) {
    let delay;
    try {
      const res = await fetch(`${base()}/events`, {
        headers: { Authorization: `Bearer ${state.key}`, Accept: 'text/event-stream' },
        cache: 'no-store',
        credentials: 'omit',
        signal,
      });
      if (res.status === 401 || res.status === 403) {
        onAuthFailure(new HttpError(res.status, null));
        return;
      }
      if (res.status === 404 || res.status === 405) {
        setLive('Live updates are not available here; use "Refresh now".', 'off');
        return;
      }
      if (!res.ok) throw new HttpError(res.status, null);
      failures = 0;
      setLive(LIVE_ON, 'on');
      const retry = await readEventStream(res, (event) => {
        const v = dataVersionOf(event);
        if (v !== null) onDataVersion(v);
      });
      delay = retry ?? 1000;
    } catch {
      if (signal.aborted) return;
      failures++;
      delay = Math.min(MAX_RECONNECT_MS, 1000 * 2 ** Math.min(failures - 1, 5));
    }
    if (signal.aborted) return;
    setLive(`Live updates paused; reconnecting in ${Math.round(delay / 1000)} s.`, 'off');
    await sleep(delay, signal);
  }
}

// ---------------------------------------------------------------------------------------------------------
// Start
// ---------------------------------------------------------------------------------------------------------

function experimentIdFromPath(pathname) {
  const m = pathname.match(/\/experiments\/([^/]+)\/?$/);
  if (!m) return null;
  try {
    return decodeURIComponent(m[1]);
  } catch {
    return null;
  }
}

function init() {
  state.id = experimentIdFromPath(location.pathname);
  if (!state.id) {
    setStatus('This page expects an address of the form /experiments/{id}.', 'error');
    return;
  }

  $('key-form').addEventListener('submit', (ev) => {
    ev.preventDefault();
    const value = keyInput().value.trim();
    if (!value) {
      $('key-error').textContent = 'Enter the read key first.';
      $('key-error').hidden = false;
      $('key-input').setAttribute('aria-invalid', 'true');
      $('key-input').focus();
      return;
    }
    saveKey(value);
    state.key = value;
    state.generation++;
    remembered.clear();
    state.definition = null;
    $('key-error').hidden = true;
    $('key-input').removeAttribute('aria-invalid');
    keyInput().value = '';
    refreshNow();
  });
  $('refresh-button').addEventListener('click', refreshNow);
  $('forget-key-button').addEventListener('click', () => {
    saveKey(null);
    state.key = null;
    state.generation++;
    remembered.clear();
    state.definition = null;
    state.dataVersion = null;
    showKeyPanel(null);
  });

  state.key = loadKey();
  if (state.key) refreshNow();
  else showKeyPanel(null);
}

if (document.readyState === 'loading') document.addEventListener('DOMContentLoaded', init);
else init();
