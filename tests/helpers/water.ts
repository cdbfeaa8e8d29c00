/**
 * The one definition of the invented water-utility demo study used by the tests, the reliability checks and the
 * benchmarks (no test-runner import here, so benchmark scripts run by tsx can use it too). All data are invented.
 */
export const WATER_ID = 'water-bill-2027';

/** The demo experiment: does showing the bill first or the service first change how customers rate their water utility? */
export function waterBillDefinition(overrides: Record<string, unknown> = {}): Record<string, unknown> {
  return {
    id: WATER_ID,
    title: 'Water utility survey 2027: bill first or service first?',
    conditions: [
      { id: 'bill-first', label: 'The bill questions come first' },
      { id: 'service-first', label: 'The service questions come first' },
    ],
    measures: [
      { id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true, required: true },
      { id: 'trust', label: 'Trust in the utility (1–7)', min: 1, max: 7, integer: true, required: true },
      { id: 'fair_price', label: 'Fair monthly price in euros', min: 0, max: 200, integer: false, required: true },
    ],
    plannedPerCondition: 400,
    alpha: 0.05,
    ...overrides,
  };
}
