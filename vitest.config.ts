import { fileURLToPath } from 'node:url';
import { defineConfig } from 'vitest/config';

const src = (path: string): string => fileURLToPath(new URL(path, import.meta.url));

export default defineConfig({
  resolve: {
    // Tests run against the TypeScript sources, so no build is needed before `vitest`.
    alias: {
      '@trueshift/app': src('./services/app/src/index.ts'),
      '@trueshift/analyser': src('./packages/analyser/src/index.ts'),
      '@trueshift/analyser-service': src('./services/analyser/src/index.ts'),
      '@trueshift/api': src('./services/api/src/index.ts'),
      '@trueshift/config': src('./packages/config/src/index.ts'),
      '@trueshift/delivery': src('./services/delivery/src/index.ts'),
      '@trueshift/errors': src('./packages/errors/src/index.ts'),
      '@trueshift/formats': src('./packages/formats/src/index.ts'),
      '@trueshift/ingest': src('./services/ingest/src/index.ts'),
      '@trueshift/report': src('./packages/report/src/index.ts'),
      '@trueshift/sparkplug': src('./packages/sparkplug/src/index.ts'),
      '@trueshift/sparkplug-ingest': src('./services/sparkplug-ingest/src/index.ts'),
      '@trueshift/stats': src('./packages/stats/src/index.ts'),
      '@trueshift/store': src('./packages/store/src/index.ts'),
      '@trueshift/store-sqlite': src('./services/store-sqlite/src/index.ts'),
      '@trueshift/store-postgres': src('./services/store-postgres/src/index.ts'),
      '@trueshift/cluster': src('./services/cluster/src/index.ts'),
      '@trueshift/web': src('./services/web/src/index.ts'),
    },
  },
  test: {
    include: ['packages/*/src/**/*.test.ts', 'services/*/src/**/*.test.ts', 'test/**/*.test.ts'],
    testTimeout: 20_000,
    hookTimeout: 30_000,
  },
});
