/**
 * ISO 8601 times as trueshift reads them in every format: a date, optionally a time of day to the
 * minute, second or fraction, optionally a zone. A time without a zone is read as UTC, so the same
 * file or message gives the same answer on any machine.
 */
const ISO_8601 =
  /^(\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2})(?::(\d{2})(?:\.(\d{1,9}))?)?(Z|[+-]\d{2}:?\d{2})?)?$/;

const MS_PER_DAY = 86_400_000;

/** True when the text is written like an ISO 8601 time, whether or not the date exists. */
export function looksLikeIsoTime(text: string): boolean {
  return ISO_8601.test(text);
}

// Days from 1970-01-01 to a proleptic Gregorian date; Date.UTC would read years 0..99 as 1900..1999.
function daysFromCivil(year: number, month: number, day: number): number {
  const y = month <= 2 ? year - 1 : year;
  const era = Math.floor(y / 400);
  const yearOfEra = y - era * 400;
  const dayOfYear = Math.floor((153 * (month + (month > 2 ? -3 : 9)) + 2) / 5) + day - 1;
  const dayOfEra =
    yearOfEra * 365 + Math.floor(yearOfEra / 4) - Math.floor(yearOfEra / 100) + dayOfYear;
  return era * 146_097 + dayOfEra - 719_468;
}

function daysInMonth(year: number, month: number): number {
  if (month === 2) {
    const leap = (year % 4 === 0 && year % 100 !== 0) || year % 400 === 0;
    return leap ? 29 : 28;
  }
  return month === 4 || month === 6 || month === 9 || month === 11 ? 30 : 31;
}

/**
 * Reads an ISO 8601 time to epoch milliseconds; NaN when the text is not written that way or names
 * a moment that does not exist (30 February, 25:00, an offset of +25:00). Fractions of a
 * millisecond are dropped. Date.parse is not used because it rolls 30 February over to 2 March.
 */
export function parseIsoTime(text: string): number {
  const m = ISO_8601.exec(text);
  if (m === null) return Number.NaN;
  const year = Number(m[1]);
  const month = Number(m[2]);
  const day = Number(m[3]);
  if (month < 1 || month > 12 || day < 1 || day > daysInMonth(year, month)) return Number.NaN;
  const hour = m[4] === undefined ? 0 : Number(m[4]);
  const minute = m[5] === undefined ? 0 : Number(m[5]);
  const second = m[6] === undefined ? 0 : Number(m[6]);
  if (hour > 23 || minute > 59 || second > 59) return Number.NaN;
  const fraction = m[7];
  const ms = fraction === undefined ? 0 : Number(fraction.slice(0, 3).padEnd(3, '0'));
  let offsetMinutes = 0;
  const zone = m[8];
  if (zone !== undefined && zone !== 'Z') {
    const digits = zone.slice(1).replace(':', '');
    const zoneHours = Number(digits.slice(0, 2));
    const zoneMinutes = Number(digits.slice(2));
    if (zoneHours > 23 || zoneMinutes > 59) return Number.NaN;
    offsetMinutes = (zone.startsWith('-') ? -1 : 1) * (zoneHours * 60 + zoneMinutes);
  }
  return (
    daysFromCivil(year, month, day) * MS_PER_DAY +
    ((hour * 60 + minute - offsetMinutes) * 60 + second) * 1000 +
    ms
  );
}
