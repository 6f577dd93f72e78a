/** Numbers for people: a few significant digits, no exponent for everyday sizes. */
export function num(value: number, digits = 4): string {
  if (Number.isNaN(value)) return 'n/a';
  if (!Number.isFinite(value)) return value > 0 ? '∞' : '−∞';
  if (value === 0) return '0';
  const size = Math.abs(value);
  if (size >= 1e-3 && size < 1e7) {
    const text = value.toPrecision(digits);
    return text.includes('.') && !text.includes('e') ? text.replace(/\.?0+$/, '') : text;
  }
  return value.toExponential(digits - 1);
}

export function percent(value: number): string {
  if (Number.isNaN(value)) return 'n/a';
  return `${num(value * 100, 3)}%`;
}

/** "p = 0.083", or "p < 0.0001" where more digits would claim a precision the model does not have. */
export function pText(value: number): string {
  if (Number.isNaN(value)) return 'p n/a';
  return value < 1e-4 ? 'p < 0.0001' : `p = ${num(value, 3)}`;
}

/** Lays out rows of label and text, wrapping long texts under their own column. */
export function table(rows: readonly (readonly [string, string])[], width = 100): string {
  const labelWidth = Math.max(...rows.map(([label]) => label.length)) + 2;
  const textWidth = Math.max(20, width - labelWidth);
  const out: string[] = [];
  for (const [label, text] of rows) {
    const lines = wrap(text, textWidth);
    lines.forEach((line, i) => {
      out.push(`${i === 0 ? label.padEnd(labelWidth) : ' '.repeat(labelWidth)}${line}`);
    });
  }
  return out.join('\n');
}

export function wrap(text: string, width: number): string[] {
  const lines: string[] = [];
  let line = '';
  for (const word of text.split(/\s+/)) {
    if (word === '') continue;
    if (line !== '' && line.length + 1 + word.length > width) {
      lines.push(line);
      line = word;
    } else {
      line = line === '' ? word : `${line} ${word}`;
    }
  }
  lines.push(line);
  return lines;
}

/** Counts with thousands separators: 600,000 rows reads at a glance, 600000 does not. */
export function grouped(value: number): string {
  return Math.round(value).toLocaleString('en-US');
}
