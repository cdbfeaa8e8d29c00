/**
 * The experiments, conditions and measures tables as both engines return their rows, and the one mapping from those
 * rows to the port's records. Engines differ only in how a row arrives: SQLite gives `options` as JSON text and
 * booleans as 0/1, PostgreSQL gives jsonb as an object and real booleans; each engine parses `options` before mapping.
 */
import type { ConditionRecord, ExperimentRecord, MeasureRecord, MeasureRole } from './types.js';

export interface ExperimentRow<Options = string> {
  id: number;
  slug: string;
  title: string;
  status: 'open' | 'closed';
  planned_per_condition: number | null;
  alpha: number;
  thank_you_url: string | null;
  options: Options;
  data_version: number;
  created_at: string;
  updated_at: string;
}

export interface ConditionRow {
  id: number;
  slug: string;
  label: string;
  position: number;
  response_count: number;
  excluded_count: number;
}

export interface MeasureRow {
  id: number;
  slug: string;
  label: string;
  min: number;
  max: number;
  is_integer: number | boolean;
  required: number | boolean;
  position: number;
  role: MeasureRole;
}

export function conditionRecord(c: ConditionRow): ConditionRecord {
  return { key: c.id, id: c.slug, label: c.label, position: c.position, responses: c.response_count, excluded: c.excluded_count };
}

export function measureRecord(m: MeasureRow): MeasureRecord {
  return {
    key: m.id,
    id: m.slug,
    label: m.label,
    min: m.min,
    max: m.max,
    integer: m.is_integer === true || m.is_integer === 1,
    required: m.required === true || m.required === 1,
    position: m.position,
    role: m.role,
  };
}

/** The port's record of one experiment row (options already parsed) with its conditions and measures in order. */
export function experimentRecord(
  row: ExperimentRow<Record<string, unknown>>,
  conditions: readonly ConditionRow[],
  measures: readonly MeasureRow[],
): ExperimentRecord {
  return {
    key: row.id,
    id: row.slug,
    title: row.title,
    status: row.status,
    plannedPerCondition: row.planned_per_condition,
    alpha: row.alpha,
    thankYouUrl: row.thank_you_url,
    options: row.options,
    dataVersion: row.data_version,
    createdAt: row.created_at,
    updatedAt: row.updated_at,
    conditions: conditions.map(conditionRecord),
    measures: measures.map(measureRecord),
  };
}
