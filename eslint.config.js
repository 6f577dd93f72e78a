// @ts-check
import eslint from '@eslint/js';
import tseslint from 'typescript-eslint';

export default tseslint.config(
  {
    ignores: ['**/dist/**', '**/node_modules/**', 'data/**', 'coverage/**', 'eslint.config.js'],
  },
  eslint.configs.recommended,
  ...tseslint.configs.strictTypeChecked,
  ...tseslint.configs.stylisticTypeChecked,
  {
    languageOptions: {
      parserOptions: {
        // Unit tests are left out of the package builds, so a separate project covers them.
        project: [
          './packages/*/tsconfig.json',
          './services/*/tsconfig.json',
          './test/tsconfig.json',
        ],
        tsconfigRootDir: import.meta.dirname,
      },
    },
    rules: {
      '@typescript-eslint/restrict-template-expressions': ['error', { allowNumber: true }],
      '@typescript-eslint/no-unused-vars': ['error', { argsIgnorePattern: '^_' }],
      'no-console': 'off',
    },
  },
  {
    files: ['**/*.js', '**/*.mjs'],
    ...tseslint.configs.disableTypeChecked,
    languageOptions: {
      ...tseslint.configs.disableTypeChecked.languageOptions,
      globals: { process: 'readonly', console: 'readonly' },
    },
  },
  {
    // The page's plain ES modules run in the browser, not in Node.js.
    files: ['services/web/assets/**/*.js'],
    languageOptions: {
      globals: Object.fromEntries(
        [
          'window',
          'document',
          'location',
          'history',
          'sessionStorage',
          'fetch',
          'URL',
          'URLSearchParams',
          'FormData',
          'Blob',
          'Node',
          'Element',
          'AbortController',
          'TextDecoderStream',
          'ResizeObserver',
          'setTimeout',
          'clearTimeout',
          'console',
        ].map((name) => [name, 'readonly']),
      ),
    },
  },
);
