/**
 * A small seeded random source, so simulations (the demo plant, property checks, benchmarks) give the
 * same numbers on every machine. Not for anything that needs unpredictability.
 */
export interface SeededRandom {
  /** Uniform on [0, 1). */
  uniform(): number;
  /** Standard normal. */
  normal(): number;
}

export function seededRandom(seed: number): SeededRandom {
  // mulberry32: 32 bits of state, full period, good enough for simulation.
  let state = seed >>> 0;
  const uniform = (): number => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  let spare: number | null = null;
  const normal = (): number => {
    if (spare !== null) {
      const value = spare;
      spare = null;
      return value;
    }
    // Box–Muller; 1 − u keeps the logarithm away from zero.
    const radius = Math.sqrt(-2 * Math.log(1 - uniform()));
    const angle = 2 * Math.PI * uniform();
    spare = radius * Math.sin(angle);
    return radius * Math.cos(angle);
  };
  return { uniform, normal };
}

/**
 * An AR(1) series around `level`: x_t = level + phi (x_{t−1} − level) + e_t, with the innovations
 * scaled so the series itself has standard deviation `sigma`. Plant measurements are rarely
 * independent, and the demo and benchmarks should show that.
 */
export function ar1Series(
  random: SeededRandom,
  length: number,
  level: number,
  sigma: number,
  phi: number,
): Float64Array {
  if (!(Math.abs(phi) < 1)) throw new RangeError('phi must lie strictly between −1 and 1.');
  const out = new Float64Array(length);
  const innovation = sigma * Math.sqrt(1 - phi * phi);
  let deviation = sigma * random.normal();
  for (let i = 0; i < length; i++) {
    out[i] = level + deviation;
    deviation = phi * deviation + innovation * random.normal();
  }
  return out;
}
