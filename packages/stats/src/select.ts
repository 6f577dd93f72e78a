/**
 * Selection (quickselect) and the one quantile convention used with the reference distribution.
 *
 * Convention: for M reference differences and a risk level α, let k be the largest whole number
 * with k / M <= α (how many reference differences may reach the observed one while the risk read
 * off the reference distribution stays at or below α). The upper α point is the (k + 1)-th largest
 * difference, the lower α point the (k + 1)-th smallest. Chosen so that "observed strictly above
 * the upper point" is exactly "at most k differences at or above the observed one", i.e. the risk
 * computed by `referenceRisk` is <= α. Samples-needed can therefore confirm a quantile comparison
 * with a plain counting pass, and the two never disagree.
 *
 * Private to the stats package: not part of the public API.
 */

/**
 * Largest k with k / m <= riskLevel, computed in floating point the same way `referenceRisk`
 * computes `risk = count / m` and compares it with riskLevel, so the two never disagree at the
 * boundary (e.g. 0.05 * 200 is not exactly 10 in binary).
 */
export function allowedExceedances(m: number, riskLevel: number): number {
  let k = Math.floor(riskLevel * m);
  while (k > 0 && k / m > riskLevel) k -= 1;
  while ((k + 1) / m <= riskLevel) k += 1;
  return k;
}

/**
 * Rearranges `values` in place so that values[k] holds the k-th smallest (0-based) value,
 * everything before it is <= and everything after it is >=; returns that value. Expected O(n).
 *
 * Floyd & Rivest's SELECT (Communications of the ACM 18(3), 1975, Algorithm 489): on large ranges
 * it first recurses into a small sample around the expected position of k, so the partition
 * element is almost always very close to the answer and the work is about n + min(k, n - k)
 * comparisons, well below plain quickselect. Sorting 10^6 differences would cost ~20 times more.
 * Values must not be NaN (a NaN never compares and the partition would not terminate correctly).
 */
export function selectKth(values: Float64Array, k: number): number {
  if (!Number.isInteger(k) || k < 0 || k >= values.length) {
    throw new RangeError(`k must be a whole number in [0, ${values.length - 1}], got ${k}`);
  }
  floydRivest(values, k, 0, values.length - 1);
  return values[k] ?? Number.NaN;
}

function floydRivest(a: Float64Array, k: number, leftIn: number, rightIn: number): void {
  let left = leftIn;
  let right = rightIn;
  while (right > left) {
    if (right - left > 600) {
      // Narrow [left, right] to a sample-derived window that contains k with high probability.
      const n = right - left + 1;
      const m = k - left + 1;
      const z = Math.log(n);
      const s = 0.5 * Math.exp((2 * z) / 3);
      const sd = 0.5 * Math.sqrt((z * s * (n - s)) / n) * (m - n / 2 < 0 ? -1 : 1);
      const newLeft = Math.max(left, Math.floor(k - (m * s) / n + sd));
      const newRight = Math.min(right, Math.floor(k + ((n - m) * s) / n + sd));
      floydRivest(a, k, newLeft, newRight);
    }
    const t = a[k] ?? Number.NaN;
    let i = left;
    let j = right;
    swap(a, left, k);
    if ((a[right] ?? Number.NaN) > t) swap(a, left, right);
    while (i < j) {
      swap(a, i, j);
      i += 1;
      j -= 1;
      while ((a[i] ?? Number.NaN) < t) i += 1;
      while ((a[j] ?? Number.NaN) > t) j -= 1;
    }
    if (a[left] === t) {
      swap(a, left, j);
    } else {
      j += 1;
      swap(a, j, right);
    }
    if (j <= k) left = j + 1;
    if (k <= j) right = j - 1;
  }
}

function swap(a: Float64Array, i: number, j: number): void {
  const tmp = a[i] ?? Number.NaN;
  a[i] = a[j] ?? Number.NaN;
  a[j] = tmp;
}

function requireSample(values: Float64Array, riskLevel: number): void {
  if (values.length === 0) throw new RangeError('cannot take a quantile of no values');
  if (!(riskLevel > 0 && riskLevel < 1)) {
    throw new RangeError(`riskLevel must lie strictly between 0 and 1, got ${riskLevel}`);
  }
}

/**
 * Upper α point under the convention above: the (k + 1)-th largest value. Reorders `values` (pass a
 * scratch copy). O(n).
 */
export function upperQuantile(values: Float64Array, riskLevel: number): number {
  requireSample(values, riskLevel);
  const k = allowedExceedances(values.length, riskLevel);
  return selectKth(values, values.length - 1 - k);
}

/**
 * Lower α point under the convention above: the (k + 1)-th smallest value. Reorders `values`
 * (pass a scratch copy). O(n).
 */
export function lowerQuantile(values: Float64Array, riskLevel: number): number {
  requireSample(values, riskLevel);
  const k = allowedExceedances(values.length, riskLevel);
  return selectKth(values, k);
}
