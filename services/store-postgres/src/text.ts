/** Raw payloads and error texts kept by the store are cut to this many UTF-8 bytes. */
export const TEXT_LIMIT_BYTES = 64 * 1024;

/**
 * Cuts `text` to at most `maxBytes` of UTF-8 without splitting a character, so a quarantined
 * megabyte payload cannot bloat the database while its start stays readable. The same cut as the
 * SQLite backend's, so both keep the same text.
 */
export function cutUtf8(text: string, maxBytes: number = TEXT_LIMIT_BYTES): string {
  // A UTF-16 code unit never needs more than 3 bytes of UTF-8, so short texts skip the encoding.
  if (text.length * 3 <= maxBytes) return text;
  const bytes = Buffer.from(text, 'utf8');
  if (bytes.length <= maxBytes) return text;
  let end = maxBytes;
  // Step back over continuation bytes (10xxxxxx) to the first byte of the character that straddles.
  while (end > 0 && ((bytes[end] ?? 0) & 0xc0) === 0x80) end--;
  return bytes.subarray(0, end).toString('utf8');
}
