/**
 * The packed copy of one response's values kept on its response row (responses.packed_values, migration 0008):
 * "measureKey=value" pairs joined by ",", e.g. "12=4,13=0.25". Values are written in a form that reads back as the
 * same double (JavaScript's String(number) is the shortest round-trip form; the migration wrote '%!.17g'), so the
 * pairs with the response's condition and excluded flag give the full primary key of every value row:
 * (measure_id, condition_id, excluded, value, response_id). An empty string: a response without values.
 */

/** Add one pair to a packed copy (the only place that writes the format; the migration writes the same). */
export function appendPacked(packed: string, measureKey: number, value: number): string {
  return packed.length === 0 ? `${measureKey}=${value}` : `${packed},${measureKey}=${value}`;
}

/** Pack measureKey → value pairs (in the map's order). */
export function packValues(values: ReadonlyMap<number, number>): string {
  let s = '';
  for (const [measureKey, value] of values) s = appendPacked(s, measureKey, value);
  return s;
}

/** Call `each(measureKey, value)` for every pair of a packed copy. O(length). */
export function forEachPacked(packed: string, each: (measureKey: number, value: number) => void): void {
  if (packed.length === 0) return;
  let start = 0;
  while (start < packed.length) {
    let end = packed.indexOf(',', start);
    if (end < 0) end = packed.length;
    const eq = packed.indexOf('=', start);
    if (eq < 0 || eq > end) throw new Error(`packed values are malformed: ${JSON.stringify(packed)}`);
    each(Number(packed.slice(start, eq)), Number(packed.slice(eq + 1, end)));
    start = end + 1;
  }
}

/** The pairs of a packed copy as [measureKey, value] tuples. */
export function unpackValues(packed: string): [number, number][] {
  const out: [number, number][] = [];
  forEachPacked(packed, (m, v) => out.push([m, v]));
  return out;
}

/** The value of one measure in a packed copy, or undefined. */
export function packedValueOf(packed: string, measureKey: number): number | undefined {
  const prefix = `${measureKey}=`;
  let from: number;
  if (packed.startsWith(prefix)) from = prefix.length;
  else {
    const at = packed.indexOf(`,${prefix}`);
    if (at < 0) return undefined;
    from = at + 1 + prefix.length;
  }
  let end = packed.indexOf(',', from);
  if (end < 0) end = packed.length;
  return Number(packed.slice(from, end));
}
