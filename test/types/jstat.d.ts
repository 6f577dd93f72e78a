// jstat ships no type declarations; only the tests use it, as an independent reference.
declare module 'jstat' {
  interface JStatStatic {
    studentt: {
      cdf(x: number, dof: number): number;
      inv(p: number, dof: number): number;
      pdf(x: number, dof: number): number;
    };
    normal: {
      cdf(x: number, mean: number, sd: number): number;
      inv(p: number, mean: number, sd: number): number;
      pdf(x: number, mean: number, sd: number): number;
    };
    ibeta(x: number, a: number, b: number): number;
    gammaln(x: number): number;
  }
  const jStat: JStatStatic;
  export default jStat;
}
