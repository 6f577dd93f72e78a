import { describe, expect, it } from 'vitest';
import { createProgressBar, progressLine } from './progress.js';

const at = (rows: number, bytes: number) => ({
  file: 'history.csv',
  rows,
  bytes,
  totalBytes: 1000,
  line: rows + 1,
});

describe('the import progress bar', () => {
  it('shows the share of bytes read, the rows and the rate', () => {
    expect(progressLine(at(25_000, 500), 2000)).toBe(
      'history.csv [############............]  50%  25,000 rows  12,500 rows/s',
    );
    expect(progressLine({ ...at(0, 0), totalBytes: 0 }, 0)).toBe(
      'history.csv [########################] 100%  0 rows  0 rows/s',
    );
  });

  it('redraws in place at most every 100 ms, always the last state, and clears the line after', () => {
    let now = 0;
    const written: string[] = [];
    const bar = createProgressBar(
      (text) => written.push(text),
      () => now,
    );
    bar.update(at(5000, 100));
    now = 50;
    bar.update(at(10_000, 200));
    now = 150;
    bar.update(at(15_000, 300));
    now = 160;
    bar.update(at(16_000, 1000));
    bar.finish();
    expect(written.map((text) => /(\d+)%/.exec(text)?.[1] ?? 'cleared')).toEqual([
      '10',
      '30',
      '100',
      'cleared',
    ]);
    expect(written.every((text) => text.startsWith('\r'))).toBe(true);
  });
});
