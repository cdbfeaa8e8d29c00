/**
 * Strict parsing of numbers that arrive as text (HTML form fields). Accepted: the WHATWG HTML "valid
 * floating-point number" grammar (https://html.spec.whatwg.org/multipage/common-microsyntaxes.html#valid-floating-point-number),
 * which is what an <input type="number"> submits: an optional "-", digits with an optional fraction (or only a
 * fraction, ".5"), and an optional exponent ("1e2", "1E-3"). Everything else is refused with a reason:
 *  - "7abc", "", " 7", "7 ", "+7", "0x10", "5.", "1,5", "NaN", "Infinity"  → not_a_number
 *  - "1e999" (valid form, but no finite double)                             → not_finite
 *  - more than 40 characters                                                → too_many_digits
 * "-0" parses to -0; ingest stores it as 0.
 */
import { MAX_NUMBER_LENGTH } from '../../schemas/field-errors.js';
import type { RejectionReason } from '../../store/types.js';

const HTML_FLOAT = /^-?(?:[0-9]+(?:\.[0-9]+)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/;

/** A form field that could not be read as a number, with the reason it is refused. */
export class FormNumberFailure {
  constructor(
    readonly text: string,
    readonly reason: Extract<RejectionReason, 'not_a_number' | 'not_finite' | 'too_many_digits'>,
  ) {}
  toJSON(): string {
    return this.text;
  }
}

export function parseFormNumber(text: string): number | FormNumberFailure {
  if (text.length > MAX_NUMBER_LENGTH) return new FormNumberFailure(text, 'too_many_digits');
  if (!HTML_FLOAT.test(text)) return new FormNumberFailure(text, 'not_a_number');
  const n = Number(text);
  if (!Number.isFinite(n)) return new FormNumberFailure(text, 'not_finite');
  return n;
}
