import { readdirSync } from 'node:fs';
import { join, relative } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const root = fileURLToPath(new URL('..', import.meta.url));
const SKIP = new Set(['node_modules', 'dist', '.git', 'data', 'coverage']);
// Names fixed by the tools or by convention keep their own case.
const FIXED = new Set(['README.md', 'DEVELOPERS.md', 'Dockerfile', '.gitignore']);

function walk(dir: string, out: string[]): string[] {
  for (const entry of readdirSync(dir, { withFileTypes: true })) {
    if (SKIP.has(entry.name)) continue;
    const path = join(dir, entry.name);
    out.push(path);
    if (entry.isDirectory()) walk(path, out);
  }
  return out;
}

describe('repository layout', () => {
  it('keeps every file and folder name in kebab-case', () => {
    const bad = walk(root, [])
      .map((path) => relative(root, path))
      .filter((path) => {
        const name = path.split('/').pop() ?? '';
        if (FIXED.has(name)) return false;
        return !/^\.?[a-z0-9]+(?:[-.][a-z0-9]+)*$/.test(name);
      });
    expect(bad).toEqual([]);
  });

  it('has the top level the project promises', () => {
    const top = readdirSync(root);
    for (const name of ['services', 'packages', 'test', 'package.json', 'tsconfig.json']) {
      expect(top).toContain(name);
    }
    for (const name of ['README.md', 'DEVELOPERS.md']) expect(top).toContain(name);
  });
});
