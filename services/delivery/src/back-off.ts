/**
 * Retry delays: exponential back-off with full jitter (the delay is drawn uniformly between zero
 * and the exponential cap), so many entries that failed together do not retry together and a
 * receiver coming back is not hit by a synchronised wave.
 */
export interface BackOffOptions {
  baseDelayMs: number;
  maxDelayMs: number;
}

/** The delay before the next attempt after `failures` failed ones (1 after the first failure). */
export function retryDelay(
  failures: number,
  options: BackOffOptions,
  random: () => number,
): number {
  const exponent = Math.max(0, failures - 1);
  // 2^exponent overflows to Infinity long after the cap is reached, and Math.min handles that.
  const cap = Math.min(options.maxDelayMs, options.baseDelayMs * 2 ** exponent);
  return Math.floor(random() * cap);
}

/**
 * A Retry-After header in seconds or as an HTTP date, as milliseconds from `now`; null when absent
 * or unreadable.
 */
export function retryAfterMs(header: string | null, now: number): number | null {
  if (header === null) return null;
  const text = header.trim();
  if (/^\d+$/.test(text)) return Number(text) * 1000;
  // Only the IMF-fixdate form HTTP uses: Date.parse alone takes "-5" for the year -5.
  if (!/^[A-Za-z]{3}, \d{2} [A-Za-z]{3} \d{4} \d{2}:\d{2}:\d{2} GMT$/.test(text)) return null;
  const at = Date.parse(text);
  return Number.isNaN(at) ? null : Math.max(0, at - now);
}
