// Types for format.js (a plain browser ES module shared by the results page and the tests).
export declare const MINUS: string;
export declare const MISSING: string;
export interface IntervalLike {
  lower?: number | null;
  upper?: number | null;
  level?: number | null;
  reason?: string;
}
export type FormatKind = 'number' | 'count' | 'p' | 'interval' | 'level' | 'percent' | 'z' | 'text';
export declare function formatNumber(x: unknown, digits?: number): string;
export declare function formatCount(n: unknown): string;
export declare function formatP(p: unknown): string;
export declare function formatPExact(p: unknown): string;
export declare function formatInterval(ci: IntervalLike | null | undefined): string;
export declare function formatLevel(level: unknown): string;
export declare function formatPercent(fraction: unknown): string;
export declare function formatZ(z: unknown): string;
export declare const FORMATTERS: Readonly<Record<FormatKind, (value: never) => string>>;
export declare function formatByKind(kind: string, value: unknown): string;
export declare function readPath(obj: unknown, path: string): unknown;
