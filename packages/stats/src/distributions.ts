/**
 * Special functions and the normal and Student t distributions, in double precision.
 *
 * Written from the published methods named beside each function, so the package needs no
 * statistics library at run time. Tail probabilities are computed directly (never as 1 - cdf),
 * because the p-values this package reports live in the tails.
 */

const LN_SQRT_2PI = 0.9189385332046728; // ln(sqrt(2 pi))
const LN_PI = 1.1447298858494002;
const ONE_OVER_SQRT_PI = 0.5641895835477563;

/**
 * Stirling series correction lnGamma(x) - [(x - 1/2) ln x - x + ln sqrt(2 pi)] for x >= 10.
 * Coefficients are B_2k / (2k (2k - 1)) from the Bernoulli numbers; eight terms keep the
 * truncation error below 1e-17 at x = 10.
 */
function stirlingCorrection(x: number): number {
  const z = 1 / (x * x);
  return (
    (1 / 12 +
      z *
        (-1 / 360 +
          z *
            (1 / 1260 +
              z *
                (-1 / 1680 +
                  z * (1 / 1188 + z * (-691 / 360360 + z * (1 / 156 + z * (-3617 / 122400)))))))) /
    x
  );
}

/** sin(pi x) with the argument reduced first, so large |x| keeps full precision. */
function sinPi(x: number): number {
  let r = x % 2; // exact in floating point
  if (r > 1) r -= 2;
  else if (r < -1) r += 2;
  if (r === 0 || r === 1 || r === -1) return 0;
  if (r > 0.5) r = 1 - r;
  else if (r < -0.5) r = -1 - r;
  return Math.sin(Math.PI * r);
}

/**
 * ln |Gamma(x)|: Stirling's series for x >= 10, the recurrence Gamma(x) = Gamma(x + n) /
 * (x (x+1) ... (x+n-1)) below that, and the reflection formula for x < 0.5. The error is a few
 * units of 1e-15, absolute where |ln Gamma| < 1 (near x = 1 and 2) and relative elsewhere.
 * Poles (0, -1, -2, ...) give +Infinity.
 */
export function logGamma(x: number): number {
  if (Number.isNaN(x)) return NaN;
  if (x === Infinity) return Infinity;
  if (x < 0.5) {
    if (x === -Infinity) return NaN;
    const s = sinPi(x);
    if (s === 0) return Infinity;
    return LN_PI - Math.log(Math.abs(s)) - logGamma(1 - x);
  }
  if (x >= 10) return (x - 0.5) * Math.log(x) - x + LN_SQRT_2PI + stirlingCorrection(x);
  let product = 1;
  let shifted = x;
  while (shifted < 10) {
    product *= shifted;
    shifted += 1;
  }
  return (
    (shifted - 0.5) * Math.log(shifted) -
    shifted +
    LN_SQRT_2PI +
    stirlingCorrection(shifted) -
    Math.log(product)
  );
}

/**
 * ln B(a, b). For large arguments the naive lnGamma(a) + lnGamma(b) - lnGamma(a + b) cancels
 * numbers of size a ln a, losing about log10(a ln a) digits; collecting the Stirling terms by
 * hand (the arrangement used in R's lbeta) keeps every term small.
 */
function logBeta(a: number, b: number): number {
  const p = Math.min(a, b);
  const q = Math.max(a, b);
  if (p >= 10) {
    const corr = stirlingCorrection(p) + stirlingCorrection(q) - stirlingCorrection(p + q);
    return (
      -0.5 * Math.log(q) +
      LN_SQRT_2PI +
      corr +
      (p - 0.5) * Math.log(p / (p + q)) +
      q * Math.log1p(-p / (p + q))
    );
  }
  if (q >= 10) {
    const corr = stirlingCorrection(q) - stirlingCorrection(p + q);
    return logGamma(p) + corr + p - p * Math.log(p + q) + (q - 0.5) * Math.log1p(-p / (p + q));
  }
  return logGamma(p) + logGamma(q) - logGamma(p + q);
}

const FRACTION_TINY = 1e-300;
const FRACTION_EPS = 1e-16;
const FRACTION_MAX_TERMS = 100_000;

/**
 * Continued fraction for the incomplete beta function (Abramowitz & Stegun 26.5.8) evaluated
 * by the modified Lentz method (Lentz 1976; Thompson & Barnett 1986). Converges quickly for
 * x < (a + 1) / (a + b + 2); callers swap to the complement otherwise.
 */
function betaFraction(x: number, a: number, b: number): number {
  const apb = a + b;
  const ap1 = a + 1;
  const am1 = a - 1;
  let c = 1;
  let d = 1 - (apb * x) / ap1;
  if (Math.abs(d) < FRACTION_TINY) d = FRACTION_TINY;
  d = 1 / d;
  let h = d;
  for (let m = 1; m <= FRACTION_MAX_TERMS; m++) {
    const m2 = 2 * m;
    let coef = (m * (b - m) * x) / ((am1 + m2) * (a + m2));
    d = 1 + coef * d;
    if (Math.abs(d) < FRACTION_TINY) d = FRACTION_TINY;
    c = 1 + coef / c;
    if (Math.abs(c) < FRACTION_TINY) c = FRACTION_TINY;
    d = 1 / d;
    h *= d * c;
    coef = (-(a + m) * (apb + m) * x) / ((a + m2) * (ap1 + m2));
    d = 1 + coef * d;
    if (Math.abs(d) < FRACTION_TINY) d = FRACTION_TINY;
    c = 1 + coef / c;
    if (Math.abs(c) < FRACTION_TINY) c = FRACTION_TINY;
    d = 1 / d;
    const delta = d * c;
    h *= delta;
    if (Math.abs(delta - 1) < FRACTION_EPS) break;
  }
  return h;
}

/**
 * I_x(a, b) with y = 1 - x and lnPower = a ln x + b ln y supplied by the caller: the caller can
 * often form y and the logarithms without the rounding of 1 - x, which matters when x is close
 * to 1.
 */
function incompleteBeta(x: number, y: number, a: number, b: number, lnPower: number): number {
  const front = Math.exp(lnPower - logBeta(a, b));
  // The side is chosen on whichever of x and y is the smaller, so rounding of the other to 1
  // cannot pick the wrong (cancelling) side.
  if (x <= 0.5 ? x < (a + 1) / (a + b + 2) : y > (b + 1) / (a + b + 2)) {
    return (front * betaFraction(x, a, b)) / a;
  }
  return 1 - (front * betaFraction(y, b, a)) / b;
}

/**
 * Regularized incomplete beta function I_x(a, b) for 0 <= x <= 1, a > 0, b > 0; about 1e-14
 * relative for moderate a and b, a little worse (1e-13) when both are large and x is near
 * a / (a + b), where the fraction converges slowly. NaN in, NaN out; impossible parameters throw
 * a RangeError.
 */
export function regularizedIncompleteBeta(x: number, a: number, b: number): number {
  if (Number.isNaN(x) || Number.isNaN(a) || Number.isNaN(b)) return NaN;
  if (!(a > 0 && b > 0 && Number.isFinite(a) && Number.isFinite(b))) {
    throw new RangeError(
      `regularizedIncompleteBeta: shape parameters must be finite and > 0 (got a = ${a}, b = ${b})`,
    );
  }
  if (x < 0 || x > 1) {
    throw new RangeError(`regularizedIncompleteBeta: x must lie in [0, 1] (got ${x})`);
  }
  if (x === 0) return 0;
  if (x === 1) return 1;
  const y = 1 - x;
  return incompleteBeta(x, y, a, b, a * Math.log(x) + b * Math.log1p(-x));
}

// W. J. Cody, "Rational Chebyshev approximations for the error function", Math. Comp. 23 (1969)
// 631-638, coefficients as distributed in his SPECFUN package (CALERF), written here as the
// shortest decimals that give the same doubles.
const ERF_A = [
  3.1611237438705655, 113.86415415105016, 377.485237685302, 3209.3775891384694, 0.18577770618460315,
] as const;
const ERF_B = [
  23.601290952344122, 244.02463793444417, 1282.6165260773723, 2844.236833439171,
] as const;
const ERFC_C = [
  0.5641884969886701, 8.883149794388377, 66.11919063714163, 298.6351381974001, 881.952221241769,
  1712.0476126340707, 2051.0783778260716, 1230.3393547979972, 2.1531153547440383e-8,
] as const;
const ERFC_D = [
  15.744926110709835, 117.6939508913125, 537.1811018620099, 1621.3895745666903, 3290.7992357334597,
  4362.619090143247, 3439.3676741437216, 1230.3393548037495,
] as const;
const ERFC_P = [
  0.30532663496123236, 0.36034489994980445, 0.12578172611122926, 0.016083785148742275,
  0.0006587491615298378, 0.016315387137302097,
] as const;
const ERFC_Q = [
  2.568520192289822, 1.8729528499234604, 0.5279051029514285, 0.06051834131244132,
  0.0023352049762686918,
] as const;

/** erf(y) for |y| <= 0.46875 (Cody's first interval). */
function erfSmall(y: number): number {
  const z = y * y;
  const num = (((ERF_A[4] * z + ERF_A[0]) * z + ERF_A[1]) * z + ERF_A[2]) * z + ERF_A[3];
  const den = (((z + ERF_B[0]) * z + ERF_B[1]) * z + ERF_B[2]) * z + ERF_B[3];
  return (y * num) / den;
}

/** exp(y^2) erfc(y) for y > 0.46875 (Cody's second and third intervals). */
function scaledErfc(y: number): number {
  if (y <= 4) {
    let num = ERFC_C[8] * y;
    let den = y;
    for (let i = 0; i < 7; i++) {
      num = (num + (ERFC_C[i] ?? 0)) * y;
      den = (den + (ERFC_D[i] ?? 0)) * y;
    }
    return (num + ERFC_C[7]) / (den + ERFC_D[7]);
  }
  const z = 1 / (y * y);
  let num = ERFC_P[5] * z;
  let den = z;
  for (let i = 0; i < 4; i++) {
    num = (num + (ERFC_P[i] ?? 0)) * z;
    den = (den + (ERFC_Q[i] ?? 0)) * z;
  }
  const r = (z * (num + ERFC_P[4])) / (den + ERFC_Q[4]);
  return (ONE_OVER_SQRT_PI - r) / y;
}

/**
 * exp(-z^2 / 2) for z >= 0 without the rounding error of forming z^2: z is split into a
 * 1/16-grid part whose square is exact and a small remainder (Cody's device).
 */
function expNegHalfSquare(z: number): number {
  const hi = Math.trunc(z * 16) / 16;
  return Math.exp((-hi * hi) / 2) * Math.exp((-(z - hi) * (z + hi)) / 2);
}

/** P(Z > z) for z >= 0, accurate to a few ulps relative all the way to underflow. */
function normalUpperTail(z: number): number {
  const y = z * Math.SQRT1_2;
  if (y <= 0.46875) return 0.5 - 0.5 * erfSmall(y);
  if (z === Infinity) return 0;
  return 0.5 * scaledErfc(y) * expNegHalfSquare(z);
}

/** Standard normal cumulative distribution function P(Z <= z), via erfc (Cody 1969). */
export function normalCdf(z: number): number {
  if (Number.isNaN(z)) return NaN;
  return z < 0 ? normalUpperTail(-z) : 1 - normalUpperTail(z);
}

// M. J. Wichura, "Algorithm AS 241: The percentage points of the normal distribution",
// Applied Statistics 37 (1988) 477-484, routine PPND16 (shortest decimals giving the same doubles).
const AS241_A = [
  3.3871328727963665, 133.14166789178438, 1971.5909503065513, 13731.69376550946, 45921.95393154987,
  67265.7709270087, 33430.57558358813, 2509.0809287301227,
] as const;
const AS241_B = [
  1, 42.31333070160091, 687.1870074920579, 5394.196021424751, 21213.794301586597, 39307.89580009271,
  28729.085735721943, 5226.495278852854,
] as const;
const AS241_C = [
  1.4234371107496835, 4.630337846156546, 5.769497221460691, 3.6478483247632045, 1.2704582524523684,
  0.2417807251774506, 0.022723844989269184, 0.0007745450142783414,
] as const;
const AS241_D = [
  1, 2.053191626637759, 1.6763848301838038, 0.6897673349851, 0.14810397642748008,
  0.015198666563616457, 0.0005475938084995345, 1.0507500716444169e-9,
] as const;
const AS241_E = [
  6.657904643501103, 5.463784911164114, 1.7848265399172913, 0.29656057182850487,
  0.026532189526576124, 0.0012426609473880784, 0.000027115555687434876, 2.0103343992922881e-7,
] as const;
const AS241_F = [
  1, 0.599832206555888, 0.1369298809227358, 0.014875361290850615, 0.0007868691311456133,
  0.000018463183175100548, 1.421511758316446e-7, 2.0442631033899397e-15,
] as const;

function polynomial(coefficients: readonly number[], x: number): number {
  let sum = 0;
  for (let i = coefficients.length - 1; i >= 0; i--) sum = sum * x + (coefficients[i] ?? 0);
  return sum;
}

/**
 * Standard normal quantile: z with P(Z <= z) = p. Wichura's AS 241 (PPND16), relative accuracy
 * about 1e-16. p = 0 and p = 1 give -Infinity and +Infinity.
 */
export function normalQuantile(p: number): number {
  if (Number.isNaN(p)) return NaN;
  if (p < 0 || p > 1) throw new RangeError(`normalQuantile: p must lie in [0, 1] (got ${p})`);
  if (p === 0) return -Infinity;
  if (p === 1) return Infinity;
  const q = p - 0.5;
  if (Math.abs(q) <= 0.425) {
    const r = 0.180625 - q * q;
    return (q * polynomial(AS241_A, r)) / polynomial(AS241_B, r);
  }
  let r = Math.sqrt(-Math.log(q < 0 ? p : 1 - p));
  let z: number;
  if (r <= 5) {
    r -= 1.6;
    z = polynomial(AS241_C, r) / polynomial(AS241_D, r);
  } else {
    r -= 5;
    z = polynomial(AS241_E, r) / polynomial(AS241_F, r);
  }
  return q < 0 ? -z : z;
}

const SQRT_PI = 1.772453850905516;
const LARGE_DF_TERMS = 40;

/**
 * Taylor coefficients g_k of g(v) = sqrt(v / (1 - exp(-v))), computed once by power-series
 * division and square root so no table of magic numbers is needed. The radius of convergence is
 * 2 pi, so |g_k| falls roughly like (2 pi)^-k.
 */
const LARGE_DF_COEFFICIENTS = ((): Float64Array => {
  const n = LARGE_DF_TERMS;
  // (1 - exp(-v)) / v = sum_j (-1)^j v^j / (j + 1)!
  const e = new Float64Array(n);
  let factorial = 1;
  for (let j = 0; j < n; j++) {
    factorial *= j + 1;
    e[j] = (j % 2 === 0 ? 1 : -1) / factorial;
  }
  const h = new Float64Array(n); // v / (1 - exp(-v)) = 1 / that series
  h[0] = 1;
  for (let k = 1; k < n; k++) {
    let s = 0;
    for (let j = 1; j <= k; j++) s += (e[j] ?? 0) * (h[k - j] ?? 0);
    h[k] = -s;
  }
  const g = new Float64Array(n); // sqrt of h
  g[0] = 1;
  for (let k = 1; k < n; k++) {
    let s = 0;
    for (let j = 1; j < k; j++) s += (g[j] ?? 0) * (g[k - j] ?? 0);
    g[k] = ((h[k] ?? 0) - s) / 2;
  }
  return g;
})();

/**
 * P(T > t) for large df, where the continued fraction loses digits: with x = df/(df+t^2) close
 * to 1 its leading terms are differences of nearly equal numbers, costing about log10(df)
 * digits. Instead, with L = ln(1 + t^2/df), a = df/2 and s = exp(-v) in the beta integral,
 *   B_x(a, 1/2) = integral_L^inf exp(-a v) v^(-1/2) g(v) dv
 *               = sum_k g_k Gamma(k + 1/2, a L) / a^(k + 1/2),
 * an expansion of the kind Temme and DiDonato & Morris (ACM TOMS 18, 1992, section 9) use for
 * large a. Every term is positive or tiny, the upper incomplete gammas follow from erfc by the
 * stable upward recurrence Gamma(s + 1, z) = s Gamma(s, z) + z^s exp(-z), and the neglected part
 * (v > 2 pi) is of order exp(-2 pi a).
 */
function studentUpperTailLargeDf(a: number, L: number, lnB: number): number {
  const z = a * L;
  const root = Math.sqrt(z);
  // exp(z) erfc(sqrt(z)), scaled so nothing underflows before the final exp(-z).
  const scaled = root <= 0.46875 ? Math.exp(z) * (1 - erfSmall(root)) : scaledErfc(root);
  let h = (SQRT_PI * scaled) / Math.sqrt(a); // exp(z) Gamma(1/2, z) / a^(1/2)
  let sum = h;
  let power = Math.sqrt(L) / a; // L^(k + 1/2) / a
  let bound = 1;
  for (let k = 0; k < LARGE_DF_TERMS - 1; k++) {
    h = ((k + 0.5) / a) * h + power;
    power *= L;
    sum += (LARGE_DF_COEFFICIENTS[k + 1] ?? 0) * h;
    // Some g_k are small by accident, so stop on the envelope (2 pi)^-k, not on one term.
    bound /= 2 * Math.PI;
    if (h * bound < 1e-17 * sum) break;
  }
  return 0.5 * Math.exp(-z - lnB) * sum;
}

/** Below this df the continued fraction is accurate; above it, and for L <= 1, the series is. */
const LARGE_DF = 50;

/**
 * P(T > t) for t > 0 through P(T > t) = I_{df/(df+t^2)}(df/2, 1/2) / 2. Both x = df/(df+t^2)
 * and y = t^2/(df+t^2), and their logarithms, are formed from whichever of t^2/df or df/t^2 is
 * below 1, so neither the rounding of 1 - x nor an overflow of t^2 spoils the tail.
 */
function studentUpperTail(t: number, df: number): number {
  let x: number;
  let y: number;
  let lnX: number;
  let lnY: number;
  const lnT2 = 2 * Math.log(t);
  const lnDf = Math.log(df);
  if (t * t < df) {
    const r = (t / df) * t;
    const l = Math.log1p(r);
    x = 1 / (1 + r);
    y = r / (1 + r);
    lnX = -l;
    lnY = lnT2 - lnDf - l;
  } else {
    const r = df / t / t;
    const l = Math.log1p(r);
    x = r / (1 + r);
    y = 1 / (1 + r);
    lnX = lnDf - lnT2 - l;
    lnY = -l;
  }
  const a = df / 2;
  // Only where the fraction would be taken in x (the complement, in y, is accurate already).
  if (df >= LARGE_DF && lnX >= -1 && y > 1.5 / (a + 2.5)) {
    return studentUpperTailLargeDf(a, -lnX, logBeta(a, 0.5));
  }
  return 0.5 * incompleteBeta(x, y, a, 0.5, a * lnX + 0.5 * lnY);
}

function checkDegreesOfFreedom(df: number, caller: string): void {
  if (!(df > 0)) {
    throw new RangeError(`${caller}: degrees of freedom must be > 0 (got ${df})`);
  }
}

/**
 * Student t cumulative distribution function P(T <= t) for real df > 0 (Welch's test needs
 * non-integer df); df = Infinity is the standard normal. NaN in t or df gives NaN.
 */
export function studentTCdf(t: number, df: number): number {
  if (Number.isNaN(t) || Number.isNaN(df)) return NaN;
  checkDegreesOfFreedom(df, 'studentTCdf');
  if (df === Infinity) return normalCdf(t);
  if (t === 0) return 0.5;
  if (t === Infinity) return 1;
  if (t === -Infinity) return 0;
  return t < 0 ? studentUpperTail(-t, df) : 1 - studentUpperTail(t, df);
}

/** ln of the Student t density at t, with lnB = ln B(df/2, 1/2) supplied by the caller. */
function studentLogDensity(t: number, df: number, lnB: number): number {
  const t2 = t * t;
  const lnBase =
    t2 < df ? Math.log1p((t / df) * t) : 2 * Math.log(t) - Math.log(df) + Math.log1p(df / t / t);
  return -0.5 * Math.log(df) - lnB - ((df + 1) / 2) * lnBase;
}

/** Cornish-Fisher expansion of the t quantile about the normal one (A&S 26.7.5). */
function cornishFisherStart(z: number, df: number): number {
  const z2 = z * z;
  const g1 = (z * (z2 + 1)) / 4;
  const g2 = (z * ((5 * z2 + 16) * z2 + 3)) / 96;
  const g3 = (z * (((3 * z2 + 19) * z2 + 17) * z2 - 15)) / 384;
  const g4 = (z * ((((79 * z2 + 776) * z2 + 1482) * z2 - 1920) * z2 - 945)) / 92160;
  return z + (g1 + (g2 + (g3 + g4 / df) / df) / df) / df;
}

const QUANTILE_MAX_STEPS = 200;

/**
 * t > 0 with P(T > t) = q, 0 < q < 0.5.
 *
 * The root is bracketed by the normal quantile below (the t tail is a scale mixture of normal
 * tails with E[scale^2] = 1, so by Jensen it lies above the normal tail) and, above, by the
 * power-law tail that the density (1 + t^2/df)^(-(df+1)/2) <= (t^2/df)^(-(df+1)/2) gives.
 * Newton steps are taken on ln P(T > t) against ln t, where power-law tails are straight lines
 * and normal-like tails concave, so the iteration converges from either side; a step that
 * would leave the bracket is replaced by geometric bisection.
 */
function studentUpperQuantile(q: number, df: number): number {
  if (df === 1) return 1 / Math.tan(Math.PI * q);
  if (df === 2) return (1 - 2 * q) / Math.sqrt(2 * q * (1 - q));
  const lnB = logBeta(df / 2, 0.5);
  const lnQ = Math.log(q);
  let lo = -normalQuantile(q);
  const lnHi = (-lnB + (df / 2 - 1) * Math.log(df) - lnQ) / df;
  let hi = Math.exp(lnHi);
  if (hi > Number.MAX_VALUE) {
    if (studentUpperTail(Number.MAX_VALUE, df) > q) return Infinity;
    hi = Number.MAX_VALUE;
  }
  if (!(lo < hi)) return lo; // only for df so large that the two bounds meet

  const cf = cornishFisherStart(lo, df);
  // Deep in a heavy tail the power-law bound is nearly exact; elsewhere the expansion is better.
  let t = hi * hi > 10 * df || !(cf > lo && cf < hi) ? hi : cf;
  for (let step = 0; step < QUANTILE_MAX_STEPS; step++) {
    const tail = studentUpperTail(t, df);
    if (tail === q) return t;
    if (tail > q) lo = t;
    else hi = t;
    const elasticity = Math.exp(Math.log(t) + studentLogDensity(t, df, lnB) - Math.log(tail));
    const logStep = Math.log(tail / q) / elasticity;
    let next = t * Math.exp(logStep);
    if (!(next > lo && next < hi)) {
      next = Math.sqrt(lo) * Math.sqrt(hi);
    } else if (Math.abs(logStep) < Math.max(1e-12, 1e-14 / elasticity)) {
      // Convergence is quadratic, so after a step this small the error is at the level of the
      // rounding in the tail probability itself (which, near the centre, is amplified by
      // 1 / elasticity and is no fault of the iteration).
      return next;
    }
    if (next === lo || next === hi) return next;
    t = next;
  }
  return t;
}

/**
 * Student t quantile: t with P(T <= t) = p, for real df > 0; df = Infinity is the normal.
 * p = 0 and p = 1 give -Infinity and +Infinity; NaN in p or df gives NaN.
 */
export function studentTQuantile(p: number, df: number): number {
  if (Number.isNaN(p) || Number.isNaN(df)) return NaN;
  checkDegreesOfFreedom(df, 'studentTQuantile');
  if (p < 0 || p > 1) throw new RangeError(`studentTQuantile: p must lie in [0, 1] (got ${p})`);
  if (df === Infinity) return normalQuantile(p);
  if (p === 0) return -Infinity;
  if (p === 1) return Infinity;
  if (p === 0.5) return 0;
  return p < 0.5 ? -studentUpperQuantile(p, df) : studentUpperQuantile(1 - p, df);
}
