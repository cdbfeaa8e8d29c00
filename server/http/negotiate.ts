/**
 * Content negotiation for the one place that needs it: does a form post come from a browser that prefers an
 * HTML page over JSON? Implements the q-value rules of RFC 9110 §12.5.1 for the Accept header, with the
 * most specific matching range deciding each media type's quality.
 */

interface MediaRange {
  type: string;
  subtype: string;
  q: number;
}

function parseAccept(header: string): MediaRange[] {
  const out: MediaRange[] = [];
  for (const part of header.split(',')) {
    const [range, ...params] = part.trim().split(';');
    const [type, subtype] = range.trim().toLowerCase().split('/');
    if (!type || !subtype) continue;
    let q = 1;
    for (const p of params) {
      const [k, v] = p.trim().split('=');
      if (k?.trim().toLowerCase() === 'q') {
        const n = Number(v);
        q = Number.isFinite(n) && n >= 0 && n <= 1 ? n : 0;
      }
    }
    out.push({ type, subtype, q });
  }
  return out;
}

/** Quality the Accept header gives a concrete media type such as text/html (0 when not acceptable). */
export function qualityOf(accept: string | undefined, mediaType: string): number {
  if (accept === undefined || accept.trim() === '') return 1;
  const [type, subtype] = mediaType.toLowerCase().split('/');
  let best = -1;
  let specificity = -1;
  for (const r of parseAccept(accept)) {
    let s = -1;
    if (r.type === type && r.subtype === subtype) s = 2;
    else if (r.type === type && r.subtype === '*') s = 1;
    else if (r.type === '*' && r.subtype === '*') s = 0;
    if (s > specificity) {
      specificity = s;
      best = r.q;
    }
  }
  return best < 0 ? 0 : best;
}

/** True when text/html is strictly preferred to JSON (application/json and application/problem+json). */
export function prefersHtml(accept: string | undefined): boolean {
  if (accept === undefined) return false;
  const html = qualityOf(accept, 'text/html');
  const json = Math.max(qualityOf(accept, 'application/json'), qualityOf(accept, 'application/problem+json'));
  return html > 0 && html > json;
}

/** True when the request body is an HTML form post (application/x-www-form-urlencoded). */
export function isFormContentType(contentType: string | undefined): boolean {
  return contentType !== undefined && contentType.split(';')[0].trim().toLowerCase() === 'application/x-www-form-urlencoded';
}
