/**
 * Balanced assignment: the permuted-block plan of an experiment's allocation (integer weights reduced by their gcd,
 * repeated until a block holds at least MIN_BLOCK slots, at most MAX_BLOCK) and a cryptographically shuffled block.
 */
import { randomInt } from 'node:crypto';
import type { ExperimentRecord } from '../store/types.js';

// ---------------------------------------------------------------------------------------------------------
// Balanced assignment: the permuted-block plan
// ---------------------------------------------------------------------------------------------------------

/** Largest block (slots) an allocation may give. */
export const MAX_BLOCK = 1000;
/** Smallest block: the reduced weights are repeated until a block has at least this many slots. */
export const MIN_BLOCK = 4;

function gcd(a: number, b: number): number {
  while (b) [a, b] = [b, a % b];
  return a;
}

export type BlockPlan =
  | {
      ok: true;
      /** Integer weights per condition, in definition order (reduced by their gcd). */
      weights: number[];
      /** Copies of the reduced weights per block. */
      multiplier: number;
      blockSize: number;
      /** Condition keys with repeats (sorted by definition order): what every block contains. */
      template: number[];
    }
  | { ok: false; reason: string };

/**
 * Permuted blocks for the planned allocation: weights from options.allocation (equal when absent), turned into
 * the smallest whole numbers with the same ratios (decimal weights with up to three decimals are exact), then
 * repeated until a block has at least MIN_BLOCK slots: [1, 1] → blocks of 4, [1, 2] → 6, [2, 3] → 5,
 * [1, 1, 1] → 6. O(conditions).
 */
export function blockPlan(experiment: ExperimentRecord): BlockPlan {
  const alloc = experiment.options.allocation as Record<string, number> | null | undefined;
  const raw = experiment.conditions.map((c) => (alloc && typeof alloc[c.id] === 'number' ? alloc[c.id] : alloc ? Number.NaN : 1));
  if (raw.some((w) => !(w > 0) || !Number.isFinite(w))) {
    return { ok: false, reason: 'The allocation needs a positive weight for every condition.' };
  }
  let ints: number[] | null = null;
  for (const scale of [1, 10, 100, 1000]) {
    const scaled = raw.map((w) => w * scale);
    if (scaled.every((x) => Math.abs(x - Math.round(x)) <= 1e-9 * Math.max(1, x))) {
      ints = scaled.map((x) => Math.round(x));
      break;
    }
  }
  if (!ints) return { ok: false, reason: 'The allocation weights must have at most three decimals (e.g. 1 and 2, or 0.25 and 0.75).' };
  const g = ints.reduce((acc, x) => gcd(acc, x));
  const weights = ints.map((x) => x / g);
  const sum = weights.reduce((s, x) => s + x, 0);
  const multiplier = Math.max(1, Math.ceil(MIN_BLOCK / sum));
  const blockSize = sum * multiplier;
  if (blockSize > MAX_BLOCK) {
    return {
      ok: false,
      reason: `The allocation weights give blocks of ${blockSize} respondents (more than ${MAX_BLOCK}); use small whole numbers such as 1 and 2.`,
    };
  }
  const template: number[] = [];
  experiment.conditions.forEach((c, i) => {
    for (let k = 0; k < weights[i] * multiplier; k++) template.push(c.key);
  });
  return { ok: true, weights, multiplier, blockSize, template };
}

/** Fisher–Yates shuffle with crypto.randomInt (a cryptographic source). Returns a new array. O(length). */
export function secureShuffle<T>(items: readonly T[]): T[] {
  const out = [...items];
  for (let i = out.length - 1; i > 0; i--) {
    const j = randomInt(i + 1);
    const tmp = out[i];
    out[i] = out[j];
    out[j] = tmp;
  }
  return out;
}
