/**
 * The only HTML the service writes: a minimal thank-you page and a readable error page for respondents whose
 * browser posted a plain HTML form. Everything interpolated is escaped; there is no script; the one inline
 * style is allowed by its hash in the Content-Security-Policy.
 */
import { createHash } from 'node:crypto';

const STYLE =
  'body{font:16px/1.5 system-ui,sans-serif;max-width:36rem;margin:3rem auto;padding:0 1rem;color:#1a1a1a}' +
  'h1{font-size:1.4rem}li{margin:.3rem 0}.small{color:#555;font-size:.9rem}';

const STYLE_HASH = createHash('sha256').update(STYLE, 'utf8').digest('base64');

/** Sent with every HTML page. */
/** Where a browser form post is sent after a stored response when the experiment names no thankYouUrl. */
export const THANK_YOU_PATH = '/thank-you';

export const HTML_CSP = `default-src 'none'; style-src 'sha256-${STYLE_HASH}'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'`;

export function escapeHtml(text: string): string {
  return text
    .replace(/&/g, '&amp;')
    .replace(/</g, '&lt;')
    .replace(/>/g, '&gt;')
    .replace(/"/g, '&quot;')
    .replace(/'/g, '&#39;');
}

function page(title: string, bodyHtml: string): string {
  return (
    '<!doctype html>\n<html lang="en"><head><meta charset="utf-8">' +
    '<meta name="viewport" content="width=device-width, initial-scale=1">' +
    `<meta name="robots" content="noindex"><title>${escapeHtml(title)}</title><style>${STYLE}</style></head>` +
    `<body><main><h1>${escapeHtml(title)}</h1>${bodyHtml}</main></body></html>\n`
  );
}

export function thankYouPage(): string {
  return page(
    'Thank you for taking part',
    '<p>Your answers reached the study team safely. There is nothing more you need to do.</p>' +
      '<p class="small">You may close this tab or window whenever you like.</p>',
  );
}

export interface HtmlProblem {
  status: number;
  type: string;
  title: string;
  detail: string;
  errors?: { path: string; message: string }[];
}

/** The labels a respondent saw on the form, to name measures and conditions on the error page instead of their ids. */
export interface RespondentLabels {
  measures: Record<string, string>;
  conditions: Record<string, string>;
}

/** Replace known ids in a validation message by their labels (a quoted id or one in a parenthesised list). */
function withLabels(message: string, labels: RespondentLabels | undefined): string {
  if (!labels) return message;
  return message.replace(/\(conditions: ([^)]*)\)/, (_, list: string) => {
    const named = list.split(/,\s*/).map((id) => labels.conditions[id.trim()] ?? id.trim());
    return `(the survey's versions: ${named.join('; ')})`;
  });
}

/**
 * A page a respondent can read: what went wrong and what to do, never raw JSON or internals. With `labels` (the
 * experiment's measure and condition labels) the listed problems name the questions as the form showed them.
 */
export function errorPage(problem: HtmlProblem, labels?: RespondentLabels): string {
  const slug = problem.type.split(':').pop() ?? '';
  let title: string;
  let advice: string;
  if (problem.status === 422) {
    title = 'Some answers could not be accepted';
    advice = 'Nothing was saved. Please go back with your browser’s Back button, correct the answers listed below and send the form again.';
  } else if (slug === 'experiment-closed') {
    title = 'This study has finished';
    advice = 'It has finished collecting answers, so nothing you entered was saved. Thank you for wanting to take part.';
  } else if (slug === 'response-conflict') {
    title = 'These answers were already sent';
    advice = 'Answers with this identifier were already recorded, with different content. Nothing new was saved.';
  } else if (problem.status === 401 || problem.status === 403) {
    title = 'This form cannot send answers';
    advice = 'The survey form is not set up correctly (its access key is missing or not valid). Nothing was saved. Please tell the survey team.';
  } else if (problem.status === 404) {
    title = 'Survey not found';
    advice = 'The form sends its answers to a survey that does not exist. Nothing was saved. Please tell the survey team.';
  } else if (problem.status === 413) {
    title = 'The form was too large to send';
    advice = 'Nothing was saved. Please shorten long answers and try again.';
  } else if (problem.status >= 500) {
    title = 'Something went wrong';
    advice = 'Your answers were not saved. Please try again in a moment.';
  } else {
    title = 'The answers could not be sent';
    advice = 'Nothing was saved. Please go back and try again.';
  }
  let list = '';
  if (problem.errors && problem.errors.length > 0) {
    const items = problem.errors
      .slice(0, 50)
      .map((e) => {
        const id = e.path.replace(/^values\./, '');
        const field = labels ? (e.path === 'condition' ? 'Questionnaire version' : (labels.measures[id] ?? id)) : id;
        return `<li><strong>${escapeHtml(field)}</strong>: ${escapeHtml(withLabels(e.message, labels))}</li>`;
      })
      .join('');
    list = `<ul>${items}</ul>`;
  }
  return page(title, `<p>${escapeHtml(advice)}</p>${list}<p class="small">${escapeHtml(problem.detail)} (status ${problem.status})</p>`);
}
