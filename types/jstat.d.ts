// jstat ships no types and @types/jstat does not exist; only what this project calls is declared.
declare module 'jstat' {
  interface JStatStatic {
    ibeta(x: number, a: number, b: number): number;
    ibetainv(p: number, a: number, b: number): number;
    betacf(x: number, a: number, b: number): number;
    gammaln(x: number): number;
    gammafn(x: number): number;
    lowRegGamma(a: number, x: number): number;
    gammapinv(p: number, a: number): number;
    erf(x: number): number;
    erfc(x: number): number;
    erfcinv(p: number): number;
    studentt: { cdf(x: number, df: number): number; inv(p: number, df: number): number; pdf(x: number, df: number): number };
    normal: { cdf(x: number, mean: number, sd: number): number; inv(p: number, mean: number, sd: number): number; pdf(x: number, mean: number, sd: number): number };
    chisquare: { cdf(x: number, df: number): number; inv(p: number, df: number): number };
    noncentralt: { cdf(x: number, df: number, ncp: number): number; pdf(x: number, df: number, ncp: number): number };
    centralF: { cdf(x: number, df1: number, df2: number): number };
    [key: string]: unknown;
  }
  const jStat: JStatStatic & { jStat: JStatStatic };
  export default jStat;
}
