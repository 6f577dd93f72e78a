/** Text for people: numbers, shares and times as the page and the report print them. */

/** Escapes text for HTML and SVG, in element content and in quoted attributes alike. */
export function escapeHtml(text: string): string {
  return text
    .replace(/&/g, '&amp;')
    .replace(/</g, '&lt;')
    .replace(/>/g, '&gt;')
    .replace(/"/g, '&quot;')
    .replace(/'/g, '&#39;');
}

/**
 * A measurement to `digits` significant figures, without exponent notation for everyday sizes:
 * engineers read 0.0123 more easily than 1.23e-2.
 */
export function formatNumber(x: number | null | undefined, digits = 4): string {
  if (x === null || x === undefined || Number.isNaN(x)) return '–';
  if (!Number.isFinite(x)) return x > 0 ? '∞' : '−∞';
  if (x === 0) return '0';
  const magnitude = Math.abs(x);
  const text =
    magnitude >= 1e-4 && magnitude < 1e9
      ? Number(x.toPrecision(digits)).toString()
      : x.toExponential(digits - 1);
  // A true minus sign: a hyphen in front of a number is easy to miss in a table.
  return text.replace(/^-/, '−');
}

/** A difference with its sign always shown, so a fall never reads as a rise. */
export function formatSigned(x: number | null | undefined, digits = 4): string {
  if (x === null || x === undefined || Number.isNaN(x)) return '–';
  const text = formatNumber(x, digits);
  return x > 0 ? `+${text}` : text;
}

/** A share as a percentage with two significant figures, the way risks are quoted. */
export function formatPercent(share: number | null | undefined): string {
  if (share === null || share === undefined || Number.isNaN(share)) return '–';
  if (share === 0) return '0%';
  const pct = share * 100;
  const text =
    pct >= 10 ? Number(pct.toFixed(1)).toString() : Number(pct.toPrecision(2)).toString();
  return `${text}%`;
}

/** A p-value as statisticians read it: small ones as "< 0.0001" rather than a long zero string. */
export function formatP(p: number | null | undefined): string {
  if (p === null || p === undefined || Number.isNaN(p)) return '–';
  if (p < 0.0001) return '< 0.0001';
  return Number(p.toPrecision(2)).toString();
}

const pad = (n: number): string => String(n).padStart(2, '0');

/** A moment in UTC to the minute: the report is read far from the plant's time zone too. */
export function formatTime(ms: number | null | undefined): string {
  if (ms === null || ms === undefined || !Number.isFinite(ms)) return '–';
  const d = new Date(ms);
  return `${d.getUTCFullYear()}-${pad(d.getUTCMonth() + 1)}-${pad(d.getUTCDate())} ${pad(d.getUTCHours())}:${pad(d.getUTCMinutes())} UTC`;
}

/** A value with its unit, when the tag has one. */
export function withUnit(text: string, unit: string | null): string {
  return unit === null || unit === '' ? text : `${text} ${unit}`;
}
