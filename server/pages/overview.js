// The team overview (served at /): every study the key may see, sortable, kept current by conditional polling of
// GET /v1/overview (If-None-Match through the browser cache: an unchanged overview costs the server one stamp query
// per study and answers 304). Plain browser ES module; every text goes through textContent.

import { formatByKind, formatCount } from './format.js';
import { isoTime } from './workbench.js';

const KEY_STORAGE = 'splitballot.readKey';
const POLL_MS = 10_000;
const $ = (id) => document.getElementById(id);
const state = { key: null, body: null, sort: { column: 'title', descending: false }, timer: null, generation: 0 };

function h(tag, attrs = {}, ...children) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k === 'class') el.className = v;
    else if (k === 'text') el.textContent = v;
    else el.setAttribute(k, v === true ? '' : String(v));
  }
  for (const c of children.flat()) if (c !== null && c !== undefined && c !== false) el.append(typeof c === 'string' ? document.createTextNode(c) : c);
  return el;
}

/** One number marked for the browser test: data-study, data-field (path in the study's JSON), data-format. */
function num(study, field, kind, value) {
  return h('span', { class: `num num-${kind}`, 'data-study': study, 'data-field': field, 'data-format': kind }, formatByKind(kind, value));
}

function totalAnswers(s) {
  return s.conditions.reduce((t, c) => t + c.answers, 0);
}

const COLUMNS = [
  { key: 'title', label: 'Study', value: (s) => s.title.toLowerCase() },
  { key: 'status', label: 'Status', value: (s) => s.status },
  { key: 'progress', label: 'Answers per condition', value: (s) => Math.min(...s.conditions.map((c) => (c.progress === null ? c.answers : c.progress))) },
  { key: 'today', label: 'Today / this week', value: (s) => s.answersToday ?? -1 },
  { key: 'refused', label: 'Refused values', value: (s) => s.refusedValues },
  { key: 'primary', label: 'Primary outcome (a − b)', value: (s) => (s.primary && s.primary.welch.p !== null ? s.primary.welch.p : 2) },
  { key: 'warnings', label: 'Warnings', value: (s) => s.warnings },
];

function sorted(studies) {
  const col = COLUMNS.find((c) => c.key === state.sort.column) || COLUMNS[0];
  const out = studies.slice().sort((x, y) => {
    const a = col.value(x);
    const b = col.value(y);
    const order = a < b ? -1 : a > b ? 1 : x.id < y.id ? -1 : 1;
    return state.sort.descending ? -order : order;
  });
  return out;
}

function renderHead() {
  $('studies-head').replaceChildren(
    ...COLUMNS.map((c) => {
      const active = state.sort.column === c.key;
      const button = h('button', { type: 'button', class: 'sort-button', 'data-sort': c.key, text: c.label });
      button.addEventListener('click', () => {
        state.sort = { column: c.key, descending: active ? !state.sort.descending : false };
        render();
      });
      return h('th', { scope: 'col', 'aria-sort': active ? (state.sort.descending ? 'descending' : 'ascending') : 'none' }, button);
    }),
  );
}

function headline(s) {
  const p = s.primary;
  if (!p) return h('span', { class: 'muted', text: 'No primary outcome declared' });
  const parts = [
    h('a', { href: `/experiments/${encodeURIComponent(s.id)}#measure-${p.measure}`.replace(/[^A-Za-z0-9_\-/#%.]/g, '-'), text: p.label }),
    h('span', { class: 'line' }, 'Mean difference ', num(s.id, 'primary.welch.estimate', 'number', p.welch.estimate), ' ', num(s.id, 'primary.welch', 'interval', p.welch), ', Welch ', h('em', { text: 'p' }), ' ', num(s.id, 'primary.welch.p', 'p', p.welch.p)),
    h('span', { class: 'line' }, 'Hodges–Lehmann ', num(s.id, 'primary.rankSum.estimate', 'number', p.rankSum.estimate), ' ', num(s.id, 'primary.rankSum', 'interval', p.rankSum), ', rank-sum ', h('em', { text: 'p' }), ' ', num(s.id, 'primary.rankSum.p', 'p', p.rankSum.p)),
  ];
  if (p.anytimeValid) parts.push(h('span', { class: 'line' }, 'Anytime-valid ', h('em', { text: 'p' }), ' ', num(s.id, 'primary.anytimeValid.p', 'p', p.anytimeValid.p), ' ', num(s.id, 'primary.anytimeValid', 'interval', p.anytimeValid)));
  if (p.changedAfterDataCollectionBegan) parts.push(h('span', { class: 'line role-changed', text: 'Primary outcome changed after data collection began' }));
  return h('div', { class: 'headline' }, ...parts);
}

function row(s) {
  const progress = s.conditions.map((c, i) =>
    h(
      'span',
      { class: 'line' },
      `${c.label}: `,
      num(s.id, `conditions.${i}.answers`, 'count', c.answers),
      c.planned !== null ? [' of ', num(s.id, `conditions.${i}.planned`, 'count', c.planned), ' (', num(s.id, `conditions.${i}.progress`, 'percent', c.progress), ')'] : ' (no planned size)',
    ),
  );
  return h(
    'tr',
    { 'data-study': s.id },
    h('th', { scope: 'row' }, h('a', { href: `/experiments/${encodeURIComponent(s.id)}`, text: s.title }), h('span', { class: 'help' }, h('code', { text: s.id }))),
    h('td', {}, h('span', { class: `badge badge-${s.status}`, text: s.status })),
    h('td', {}, ...progress),
    h('td', {}, num(s.id, 'answersToday', 'count', s.answersToday), ' / ', num(s.id, 'answersThisWeek', 'count', s.answersThisWeek)),
    h('td', {}, num(s.id, 'refusedValues', 'count', s.refusedValues)),
    h('td', {}, headline(s)),
    h('td', {}, num(s.id, 'warnings', 'count', s.warnings)),
  );
}

function render() {
  if (!state.body) return;
  renderHead();
  $('studies-body').replaceChildren(...sorted(state.body.studies).map(row));
  $('studies').hidden = false;
  $('page-status').textContent = state.body.studies.length === 0 ? 'This key sees no studies yet.' : '';
  $('live-status').textContent = `Up to date as of ${isoTime(state.body.generatedAt)}; checked every ${POLL_MS / 1000} s (${formatCount(totalAnswers({ conditions: state.body.studies.flatMap((s) => s.conditions) }))} answers in all).`;
}

async function poll() {
  const generation = state.generation;
  clearTimeout(state.timer);
  try {
    const res = await fetch('/v1/overview', { headers: { Authorization: `Bearer ${state.key}`, Accept: 'application/json' }, cache: 'no-cache', credentials: 'omit' });
    if (generation !== state.generation) return;
    if (res.status === 401 || res.status === 403) {
      showKeyPanel(`That key was not accepted (HTTP ${res.status}). The overview needs a read or admin key.`);
      return;
    }
    if (!res.ok) throw new Error(`HTTP ${res.status}`);
    state.body = await res.json();
    $('key-panel').hidden = true;
    $('toolbar').hidden = false;
    $('live-status').dataset.tone = 'on';
    render();
  } catch (err) {
    $('page-status').textContent = `The overview could not be loaded: ${err && err.message ? err.message : String(err)}. Trying again shortly.`;
  }
  if (generation === state.generation && state.key) state.timer = setTimeout(poll, POLL_MS);
}

function showKeyPanel(message) {
  state.key = null;
  state.generation++;
  clearTimeout(state.timer);
  try {
    sessionStorage.removeItem(KEY_STORAGE);
  } catch {
    /* storage unavailable */
  }
  $('key-panel').hidden = false;
  $('toolbar').hidden = true;
  $('studies').hidden = true;
  const err = $('key-error');
  err.hidden = !message;
  err.textContent = message || '';
}

function init() {
  $('key-form').addEventListener('submit', (ev) => {
    ev.preventDefault();
    const input = /** @type {HTMLInputElement} */ ($('key-input'));
    const key = input.value.trim();
    if (!key) return;
    input.value = '';
    state.key = key;
    state.generation++;
    try {
      sessionStorage.setItem(KEY_STORAGE, key);
    } catch {
      /* storage unavailable */
    }
    poll();
  });
  $('forget-key-button').addEventListener('click', () => showKeyPanel(null));
  document.addEventListener('visibilitychange', () => {
    if (document.visibilityState === 'visible' && state.key) poll();
  });
  let saved = null;
  try {
    saved = sessionStorage.getItem(KEY_STORAGE);
  } catch {
    /* storage unavailable */
  }
  if (saved) {
    state.key = saved;
    poll();
  } else showKeyPanel(null);
}

init();
