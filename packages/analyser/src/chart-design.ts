import { solveCusumH, solveEwmaL } from '@trueshift/stats';

/** CUSUM and EWMA parameters in σ units, chosen for one target in-control ARL. */
export interface ChartDesign {
  k: number;
  h: number;
  lambda: number;
  L: number;
  targetArl: number;
}

/**
 * h for a two-sided CUSUM and L for the EWMA, each with the given in-control ARL (Markov-chain
 * ARLs, see @trueshift/stats arl.ts). Each solve costs milliseconds: callers keep the result per
 * (k, λ, ARL) rather than solving per tag or per sample.
 */
export function chartDesign(options: {
  k: number;
  lambda: number;
  targetArl: number;
}): ChartDesign {
  const { k, lambda, targetArl } = options;
  return {
    k,
    h: solveCusumH({ k, targetArl, sides: 2 }),
    lambda,
    L: solveEwmaL({ lambda, targetArl }),
    targetArl,
  };
}

/** A cache key that tells designs apart. */
export function chartDesignKey(options: { k: number; lambda: number; targetArl: number }): string {
  return `${options.k}|${options.lambda}|${options.targetArl}`;
}
