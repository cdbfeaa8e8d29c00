// Results page, three or more conditions and equivalence: the omnibus block (all conditions at once, then every
// pair) and the equivalence block of a comparison (its intervals drawn against the margin band, and the verdict
// in words). Plain browser ES module imported by results.js; it builds nodes with the helpers results.js passes
// in (`ui`: h, num, pIs, chartFigure, flagList, conditionLabel), so every number is marked as elsewhere:
//   omnibus numbers: data-source="omnibus", data-field = a path in GET …/comparisons/{measure}/omnibus;
//   equivalence numbers: data-field = "equivalence.…", a path in the pairwise comparison itself.

import { formatLevel, formatNumber, readPath } from './format.js';

const SVG_NS = 'http://www.w3.org/2000/svg';

/** A setting as the researcher typed it (0.05, 0.5), not padded to three significant digits; minus sign as format.js. */
function plain(x) {
  return typeof x === 'number' && Number.isFinite(x) ? String(Number(x.toPrecision(6))).replace('-', '\u2212') : '—';
}

// ---------------------------------------------------------------------------------------------------------
// Omnibus: all conditions, then the pairs
// ---------------------------------------------------------------------------------------------------------

/**
 * The omnibus block of one measure: the sentence on why it comes first, the three omnibus tests with an effect
 * size each, the omnibus flags, the box plot of every condition, then every pair (Games–Howell, Dunn) with a
 * sentence on the post-hoc adjustment.
 */
export function omnibusBlock(ui, mid, omni, chart) {
  const { h } = ui;
  const n = (field, kind) => ui.num(mid, field, kind, readPath(omni, field), { 'data-source': 'omnibus' });
  const p = (field) => [h('em', { text: 'p' }), ...ui.pIs(n(field, 'p'))];
  const k = Array.isArray(omni.conditions) ? omni.conditions.length : 0;
  const alpha = typeof omni.alpha === 'number' ? omni.alpha : 0.05;

  const tests = h(
    'table',
    { class: 'omnibus-tests' },
    h('caption', { class: 'visually-hidden', text: `Omnibus tests across all ${k} conditions` }),
    h('thead', {}, h('tr', {}, ...['Test', 'Statistic', 'p', 'Effect size'].map((t) => h('th', { scope: 'col', text: t })))),
    h(
      'tbody',
      {},
      h(
        'tr',
        {},
        h('th', { scope: 'row' }, "Welch's ANOVA", h('span', { class: 'help', text: 'means; unequal spreads allowed' })),
        h('td', {}, h('em', { text: 'F' }), ' = ', n('welchAnova.f', 'number'), ', df = ', n('welchAnova.df1', 'number'), ' and ', n('welchAnova.df2', 'number')),
        h('td', {}, ...p('welchAnova.p')),
        h('td', {}, 'est. ω² = ', n('welchAnova.omegaSquared', 'number')),
      ),
      h(
        'tr',
        {},
        h('th', { scope: 'row' }, 'Kruskal–Wallis', h('span', { class: 'help', text: 'ranks; tie-corrected' })),
        h('td', {}, h('em', { text: 'H' }), ' = ', n('kruskalWallis.h', 'number'), ', df = ', n('kruskalWallis.df', 'number')),
        h('td', {}, ...p('kruskalWallis.p')),
        h('td', {}, 'ε² = ', n('kruskalWallis.epsilonSquared', 'number')),
      ),
      h(
        'tr',
        { class: 'reference-row' },
        h('th', { scope: 'row' }, 'Classic ANOVA', h('span', { class: 'help', text: 'equal spreads assumed; for reference' })),
        h('td', {}, h('em', { text: 'F' }), ' = ', n('classicAnova.f', 'number'), ', df = ', n('classicAnova.df1', 'number'), ' and ', n('classicAnova.df2', 'number')),
        h('td', {}, ...p('classicAnova.p')),
        h('td', {}, 'η² = ', n('classicAnova.etaSquared', 'number'), ', ω² = ', n('classicAnova.omegaSquared', 'number')),
      ),
    ),
  );

  const pairRows = (omni.pairs || []).map((pair, i) => {
    const f = (field, kind) => n(`pairs.${i}.${field}`, kind);
    return h(
      'tr',
      { 'data-pair': `${pair.a}|${pair.b}` },
      h('th', { scope: 'row' }, `${ui.conditionLabel(pair.a)} − ${ui.conditionLabel(pair.b)}`),
      h('td', {}, f('gamesHowell.meanDifference', 'number')),
      h('td', {}, 't = ', f('gamesHowell.t', 'number'), ', df = ', f('gamesHowell.df', 'number'), ', ', h('em', { text: 'p' }), ...ui.pIs(f('gamesHowell.p', 'p'))),
      h('td', {}, 'z = ', f('dunn.z', 'number'), ', ', h('em', { text: 'p' }), ...ui.pIs(f('dunn.p', 'p'))),
      h('td', {}, f('dunn.pHolm', 'p')),
      omni.margin !== null && omni.margin !== undefined ? h('td', { class: 'verdict-cell' }, verdictText(pair.equivalence)) : null,
    );
  });
  const hasMargin = omni.margin !== null && omni.margin !== undefined;
  const pairs = h(
    'div',
    { class: 'table-scroll', tabindex: '0', role: 'region', 'aria-label': 'Every pair of conditions' },
    h(
      'table',
      { class: 'omnibus-pairs' },
      h('caption', { class: 'visually-hidden', text: 'Every pair of conditions: Games–Howell and Dunn' }),
      h(
        'thead',
        {},
        h(
          'tr',
          {},
          h('th', { scope: 'col', text: 'Pair (a − b)' }),
          h('th', { scope: 'col', text: 'Mean difference' }),
          h('th', { scope: 'col', text: 'Games–Howell (adjusted)' }),
          h('th', { scope: 'col', text: "Dunn's test (two-sided, unadjusted)" }),
          h('th', { scope: 'col', text: 'Dunn, Holm-adjusted (two-sided)' }),
          hasMargin ? h('th', { scope: 'col', text: `Equivalence within ±${plain(omni.margin)} (Welch)` }) : null,
        ),
      ),
      h('tbody', {}, ...pairRows),
    ),
  );

  return h(
    'section',
    { class: 'omnibus-block', 'data-measure': mid, 'aria-label': `All ${k} conditions together` },
    h('h3', { text: `All ${k} conditions together` }),
    h(
      'p',
      { class: 'explain' },
      `With ${k} conditions there are ${(k * (k - 1)) / 2} pairs, and testing each one on its own would raise false alarms. ` +
        'So one test first asks whether the conditions differ at all; only then do the pairs say which ones differ.',
    ),
    h('div', { class: 'table-scroll' }, tests),
    h('p', { class: 'omnibus-reading' }, omnibusSentence(omni, alpha)),
    h('section', { class: 'flags-block' }, h('h4', { text: 'Points to keep in mind (all conditions)' }), ui.flagList(omni)),
    ui.chartFigure('omnibus', `Answers of all ${k} conditions side by side: box, median, mean and every answer`, chart),
    h('h4', { text: 'Which pairs differ' }),
    h(
      'p',
      { class: 'explain' },
      'Each pair is tested after the omnibus test. The post-hoc p-values are adjusted for the number of pairs, so that all ' +
        `pairs together keep the false-alarm rate at ${plain(alpha)}: Games–Howell through the studentized range (for means), ` +
        "Dunn's test with Holm's adjustment (for ranks). Every difference is the first condition minus the second.",
    ),
    pairs,
    h('p', { class: 'explain pair-detail-note', text: 'Below: the pair chosen at the top of the page in detail, with both tests side by side.' }),
  );
}

/** One plain sentence on what the omnibus tests found. */
function omnibusSentence(omni, alpha) {
  const w = omni.welchAnova && omni.welchAnova.p;
  const kw = omni.kruskalWallis && omni.kruskalWallis.p;
  if (typeof w !== 'number' || typeof kw !== 'number') return 'The omnibus tests are not defined for these answers yet (see the notes).';
  const a = plain(alpha);
  if (w < alpha && kw < alpha) return `Both omnibus tests find that the conditions differ (p below ${a}); the pairs below show where.`;
  if (w >= alpha && kw >= alpha) return `Neither omnibus test finds a difference among the conditions (p at or above ${a}); read single pairs with care.`;
  return `The two omnibus tests disagree (one p below ${a}, the other not); see the note below before reading the pairs.`;
}

function verdictText(eq) {
  const v = eq && eq.welch && eq.welch.verdict;
  if (!v) return '—';
  return { equivalent: 'equivalent', trivial: 'trivial difference', different: 'different', inconclusive: 'inconclusive' }[v.code] || v.code;
}

// ---------------------------------------------------------------------------------------------------------
// Equivalence of one pair
// ---------------------------------------------------------------------------------------------------------

/** The equivalence block of a pairwise comparison (null when it has none). */
export function equivalenceBlock(ui, mid, cmp) {
  const eq = cmp.equivalence;
  if (!eq) return null;
  const { h } = ui;
  const n = (field, kind) => ui.num(mid, field, kind, readPath(cmp, field));
  const m = plain(eq.margin);
  const verdict = eq.welch && eq.welch.verdict ? eq.welch.verdict.words : 'The equivalence tests are not defined for these answers yet.';
  return h(
    'section',
    { class: 'equivalence-block', 'data-measure': mid, 'data-verdict': eq.welch && eq.welch.verdict ? eq.welch.verdict.code : '' },
    h('h3', { text: `Is the difference too small to matter? (margin ±${m})` }),
    h('p', { class: 'verdict' }, verdict),
    equivalenceChart(eq, ui.conditionLabel(cmp.a), ui.conditionLabel(cmp.b), `eq-${mid}`.replace(/[^A-Za-z0-9_-]/g, '-')),
    h(
      'dl',
      { class: 'facts' },
      h('dt', {}, 'Means (Welch)', h('span', { class: 'help', text: 'two one-sided tests' })),
      h(
        'dd',
        {},
        'difference ', n('equivalence.welch.meanDifference', 'number'), ', ', n('equivalence.welch.ci.level', 'level'), ' CI ', n('equivalence.welch.ci', 'interval'),
        ', ', h('em', { text: 'p' }), ...ui.pIs(n('equivalence.welch.p', 'p')),
      ),
      h('dt', {}, 'Ranks (shift)', h('span', { class: 'help', text: 'two one-sided rank-sum tests' })),
      h(
        'dd',
        {},
        'shift ', n('equivalence.rank.estimate', 'number'), ', ', n('equivalence.rank.ci.level', 'level'), ' CI ', n('equivalence.rank.ci', 'interval'),
        ', ', h('em', { text: 'p' }), ...ui.pIs(n('equivalence.rank.p', 'p')),
        h('span', { class: 'help', text: eq.rank && eq.rank.verdict ? eq.rank.verdict.words : '' }),
      ),
    ),
    h(
      'p',
      { class: 'method' },
      `Equivalence is shown when the whole ${formatLevel(1 - 2 * eq.alpha)} interval lies inside the band from −${m} to +${m}. ` +
        'The margin was set before the data were seen; a margin chosen afterwards makes this test meaningless.',
    ),
  );
}

/** The two intervals (means, ranks) drawn against the margin band, as an SVG built node by node. */
function equivalenceChart(eq, la, lb, idBase) {
  const rows = [
    { label: 'Means (Welch)', est: eq.welch && eq.welch.meanDifference, ci: eq.welch && eq.welch.ci },
    { label: 'Ranks (shift)', est: eq.rank && eq.rank.estimate, ci: eq.rank && eq.rank.ci },
  ];
  const bounds = [eq.margin];
  for (const r of rows) for (const v of [r.est, r.ci && r.ci.lower, r.ci && r.ci.upper]) if (typeof v === 'number') bounds.push(Math.abs(v));
  const R = Math.max(...bounds) * 1.25;
  const width = 560;
  const left = 120;
  const right = 20;
  const rowH = 34;
  const top = 26;
  const height = top + rows.length * rowH + 34;
  const x = (v) => left + ((v + R) / (2 * R)) * (width - left - right);
  const svg = el('svg', { viewBox: `0 0 ${width} ${height}`, role: 'img', class: 'equivalence-chart', 'aria-labelledby': `${idBase}-title ${idBase}-desc` });
  const desc = rows
    .map((r) => `${r.label}: ${fmt(r.est)} (interval ${fmt(r.ci && r.ci.lower)} to ${fmt(r.ci && r.ci.upper)})`)
    .join('; ');
  svg.append(
    el('title', { id: `${idBase}-title` }, `Difference ${la} − ${lb} against the margin ±${plain(eq.margin)}`),
    el('desc', { id: `${idBase}-desc` }, `The band shows differences too small to matter (−${plain(eq.margin)} to +${plain(eq.margin)}). ${desc}.`),
    el('rect', { x: x(-eq.margin), y: top - 8, width: x(eq.margin) - x(-eq.margin), height: rows.length * rowH + 4, fill: '#eaf1f8', stroke: '#2b5e8c', 'stroke-dasharray': '4 3' }),
    el('text', { x: x(0), y: top - 12, 'text-anchor': 'middle', 'font-size': 12, fill: '#1a4470' }, `margin ±${plain(eq.margin)}`),
    el('line', { x1: x(0), x2: x(0), y1: top - 8, y2: top + rows.length * rowH - 4, stroke: '#6b7480', 'stroke-width': 1 }),
  );
  rows.forEach((r, i) => {
    const y = top + i * rowH + rowH / 2 - 4;
    svg.append(el('text', { x: 8, y: y + 4, 'font-size': 13, fill: '#1d232b' }, r.label));
    if (r.ci && typeof r.ci.lower === 'number' && typeof r.ci.upper === 'number') {
      const inside = r.ci.lower > -eq.margin && r.ci.upper < eq.margin;
      const color = inside ? '#2b5e8c' : '#a04b1a';
      svg.append(
        el('line', { x1: x(r.ci.lower), x2: x(r.ci.upper), y1: y, y2: y, stroke: color, 'stroke-width': 3 }),
        el('line', { x1: x(r.ci.lower), x2: x(r.ci.lower), y1: y - 6, y2: y + 6, stroke: color, 'stroke-width': 2 }),
        el('line', { x1: x(r.ci.upper), x2: x(r.ci.upper), y1: y - 6, y2: y + 6, stroke: color, 'stroke-width': 2 }),
      );
    }
    if (typeof r.est === 'number') svg.append(el('circle', { cx: x(r.est), cy: y, r: 5, fill: '#1d232b' }));
  });
  const axisY = top + rows.length * rowH + 4;
  svg.append(el('line', { x1: left, x2: width - right, y1: axisY, y2: axisY, stroke: '#6b7480' }));
  const ticks = [...new Set([-R / 1.25, -eq.margin, 0, eq.margin, R / 1.25])].filter((v, i, all) => all.every((w, j) => j >= i || Math.abs(x(v) - x(w)) > 40));
  for (const v of ticks) {
    svg.append(
      el('line', { x1: x(v), x2: x(v), y1: axisY, y2: axisY + 5, stroke: '#6b7480' }),
      el('text', { x: x(v), y: axisY + 18, 'text-anchor': 'middle', 'font-size': 11, fill: '#4b5563' }, plain(Number(v.toPrecision(3)))),
    );
  }
  const fig = document.createElement('figure');
  fig.className = 'chart-figure figure-equivalence';
  const box = document.createElement('div');
  box.className = 'chart-box';
  box.append(svg);
  fig.append(box);
  return fig;
}

function fmt(v) {
  return typeof v === 'number' ? formatNumber(v) : 'not defined';
}

function el(tag, attrs, text) {
  const node = document.createElementNS(SVG_NS, tag);
  for (const [k, v] of Object.entries(attrs)) node.setAttribute(k, String(v));
  if (text !== undefined) node.textContent = text;
  return node;
}
