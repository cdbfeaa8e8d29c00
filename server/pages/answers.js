// The answers behind a flag, on the results page: for the outlier and influential-answer flags, a small table of the
// responses with their values and arrival times (from the comparison's flaggedAnswers), and for an admin key an
// Exclude / Restore action with a reason and a confirmation step. Plain browser ES module imported by results.js.
//
// Exclusion and restoration go to POST / DELETE /v1/experiments/{id}/responses/{responseId}/exclusion with the page's
// key in the Authorization header (never in the address); the audit trail records who, when and why. An answer
// excluded from this page stays listed here (marked "excluded", with Restore) until the page is reloaded, because the
// comparison itself no longer contains it.

import { isoTime } from './workbench.js';

const FLAG_NAMES = { outliers: 'Far from the rest', influential_point: 'Decides the t-test' };

/** Answers excluded from this page in this tab, per measure: responseId → the row as it was listed. */
const excludedHere = new Map();

/** The confirmation form that is open (at most one), kept across the live refreshes that redraw the page. */
let openForm = null; // { measureId, responseId, reason }

function rowsFor(measureId, cmp) {
  const listed = cmp.flaggedAnswers && Array.isArray(cmp.flaggedAnswers.answers) ? cmp.flaggedAnswers.answers : [];
  const mine = excludedHere.get(measureId) || new Map();
  const seen = new Set(listed.map((a) => a.responseId));
  const extra = [...mine.values()].filter((a) => !seen.has(a.responseId));
  return listed.concat(extra);
}

/**
 * The block under a measure's flags; null when the comparison lists no flagged answers.
 * ctx: { h, studyId, key(): string, conditionLabel(id): string, onChanged(): void }
 */
export function answersBlock(ctx, measureId, cmp) {
  const { h } = ctx;
  const rows = rowsFor(measureId, cmp);
  if (rows.length === 0) return null;
  const status = h('p', { class: 'answers-status', role: 'status', 'aria-live': 'polite' });
  const body = rows.map((a) => {
    const excluded = a.excluded || (excludedHere.get(measureId) || new Map()).has(a.responseId);
    const action = h('td', { class: 'answer-action' });
    const start = h('button', { type: 'button', class: 'button-quiet', 'data-action': excluded ? 'restore' : 'exclude', 'data-response': a.responseId, text: excluded ? 'Restore…' : 'Exclude…' });
    const cancel = () => {
      openForm = null;
      action.replaceChildren(start);
    };
    start.addEventListener('click', () => {
      openForm = { measureId, responseId: a.responseId, reason: '' };
      action.replaceChildren(confirmForm(ctx, measureId, a, excluded, status, cancel));
    });
    if (openForm && openForm.measureId === measureId && openForm.responseId === a.responseId) action.append(confirmForm(ctx, measureId, a, excluded, status, cancel));
    else action.append(start);
    return h(
      'tr',
      { 'data-response': a.responseId, class: excluded ? 'is-excluded' : '' },
      h('td', { text: FLAG_NAMES[a.flag] || a.flag }),
      h('td', { text: ctx.conditionLabel(a.condition) }),
      h('th', { scope: 'row' }, h('code', { text: a.responseId })),
      h('td', { class: 'answer-value', text: String(a.value) }),
      h('td', {}, h('time', { datetime: a.receivedAt, text: isoTime(a.receivedAt) })),
      h('td', { class: 'answer-state', text: excluded ? 'excluded' : 'included' }),
      action,
    );
  });
  const note = cmp.flaggedAnswers && cmp.flaggedAnswers.truncated ? h('p', { class: 'muted', text: `Only the first ${cmp.flaggedAnswers.limitPerGroup} answers per flag and condition are listed.` }) : null;
  return h(
    'section',
    { class: 'flagged-answers', 'aria-label': 'The answers behind the flags' },
    h('h4', { text: 'The answers behind these flags' }),
    h(
      'div',
      { class: 'table-scroll', role: 'region', 'aria-label': 'Flagged answers (scrolls sideways)', tabindex: '0' },
      h(
        'table',
        { class: 'answers-table' },
        h('thead', {}, h('tr', {}, ...['Flag', 'Condition', 'Response', 'Value', 'Arrived', 'State', 'Action'].map((t) => h('th', { scope: 'col', text: t })))),
        h('tbody', {}, ...body),
      ),
    ),
    note,
    h('p', { class: 'muted', text: 'Excluding needs an admin key; it is recorded in the audit trail with your reason. Exclude an answer for what is known about it, not for its value.' }),
    status,
  );
}

function confirmForm(ctx, measureId, answer, excluded, status, cancel) {
  const { h } = ctx;
  const form = h('form', { class: 'answer-confirm', novalidate: true });
  const reasonId = `reason-${measureId}-${answer.responseId}`.replace(/[^A-Za-z0-9_-]/g, '-');
  const reason = excluded ? null : h('input', { id: reasonId, name: 'reason', type: 'text', required: true, maxlength: '500', autocomplete: 'off' });
  if (reason && openForm && openForm.responseId === answer.responseId) {
    reason.value = openForm.reason || '';
    reason.addEventListener('input', () => {
      if (openForm && openForm.responseId === answer.responseId) openForm.reason = reason.value;
    });
  }
  const confirm = h('button', { type: 'submit', 'data-confirm': excluded ? 'restore' : 'exclude', text: excluded ? 'Confirm restore' : 'Confirm exclusion' });
  const back = h('button', { type: 'button', class: 'button-quiet', text: 'Cancel' });
  back.addEventListener('click', cancel);
  if (reason) form.append(h('label', { for: reasonId, text: 'Reason (kept in the audit trail)' }), reason);
  else form.append(h('span', { text: `Take ${answer.responseId} back into the comparisons?` }));
  form.append(confirm, back);
  form.addEventListener('submit', async (ev) => {
    ev.preventDefault();
    const text = reason ? reason.value.trim() : '';
    if (reason && text === '') {
      status.textContent = 'Please say why this answer is excluded.';
      reason.focus();
      return;
    }
    confirm.disabled = true;
    try {
      const res = await fetch(`/v1/experiments/${encodeURIComponent(ctx.studyId)}/responses/${encodeURIComponent(answer.responseId)}/exclusion`, {
        method: excluded ? 'DELETE' : 'POST',
        headers: { Authorization: `Bearer ${ctx.key()}`, Accept: 'application/json', ...(excluded ? {} : { 'Content-Type': 'application/json' }) },
        body: excluded ? undefined : JSON.stringify({ reason: text }),
        credentials: 'omit',
      });
      if (!res.ok) {
        let detail = `HTTP ${res.status}`;
        try {
          const p = await res.json();
          detail = p.detail || p.title || detail;
        } catch {
          /* not JSON */
        }
        status.textContent = res.status === 403 ? 'Excluding or restoring needs an admin key.' : `Not changed: ${detail}`;
        if (res.status === 401 || res.status === 403) openForm = null; // another key is needed: start again with it
        confirm.disabled = false;
        return;
      }
      openForm = null;
      const mine = excludedHere.get(measureId) || new Map();
      if (excluded) mine.delete(answer.responseId);
      else mine.set(answer.responseId, { ...answer, excluded: true });
      excludedHere.set(measureId, mine);
      status.textContent = excluded ? `${answer.responseId} is counted again.` : `${answer.responseId} is excluded; the figures update.`;
      ctx.onChanged();
    } catch (err) {
      status.textContent = `Not changed: ${err && err.message ? err.message : String(err)}`;
      confirm.disabled = false;
    }
  });
  queueMicrotask(() => (reason || confirm).focus());
  return form;
}
