/**
 * A small plant behind the real service for the page's tests: the API with the page mounted, the
 * real analyser following a real SQLite store, and four tags seeded through the HTTP API so each
 * lands in a different state. Everything listens on 127.0.0.1 only.
 */
import { buildAnalyser } from '@trueshift/analyser-service';
import type { Analyser } from '@trueshift/analyser-service';
import { seededRandom } from '@trueshift/stats';
import { registerWeb } from '@trueshift/web';
import { captureLog } from './logs.js';
import { startTestApi, T0 } from './api.js';
import type { TestApi } from './api.js';

export const HOUR = 3_600_000;
const MINUTE = 60_000;

/** A credible fall with its alert open. */
export const STEAM = 'evap1/steam-per-tonne';
/** Quiet, with no change marked: the test marks one from the page. */
export const MOISTURE = 'dryer/outlet-moisture';
/** Went silent: a data problem. */
export const PURITY = 'line2/purity';
/** A mark with only a few samples after it. */
export const ENERGY = 'kiln/energy-per-tonne';

export interface WebPlant {
  api: TestApi;
  analyser: Analyser;
  base: string;
  marks: { steamTrap: string; burner: string };
  /** When the moisture tag's samples from #130 on were taken: where the page test marks a change. */
  moistureChangeAt: number;
  close(): Promise<void>;
}

interface Sample {
  tag: string;
  t: number;
  value: number;
}

export async function startWebPlant(
  options: { readWithoutToken?: boolean } = {},
): Promise<WebPlant> {
  let analyser: Analyser | undefined;
  const api = await startTestApi({
    config: {
      http: { host: '127.0.0.1', port: 0, readWithoutToken: options.readWithoutToken ?? false },
    },
    around: (store, clock) => {
      analyser = buildAnalyser({
        store,
        clock,
        log: captureLog('warn').log,
        // Polls, so a mark made from the page is evaluated without the test stepping in.
        options: { pollMs: 50 },
      });
      return { events: analyser.events };
    },
  });
  if (analyser === undefined) throw new Error('the analyser was not built');
  const running = analyser;
  registerWeb(api.app, { store: api.store, clock: () => api.now.t, config: api.config });
  const base = await api.listen();
  api.now.t = T0;

  const send = async (path: string, body: unknown, method = 'POST'): Promise<unknown> => {
    const response = await fetch(`${base}${path}`, {
      method,
      headers: { ...api.as('admin'), 'content-type': 'application/json' },
      body: JSON.stringify(body),
    });
    const answer: unknown = await response.json();
    if (!response.ok) throw new Error(`${method} ${path}: ${JSON.stringify(answer)}`);
    return answer;
  };
  const rng = seededRandom(20260601);
  const series = (
    tag: string,
    start: number,
    step: number,
    count: number,
    level: (i: number) => number,
    sd: number,
  ): Sample[] =>
    Array.from({ length: count }, (_, i) => ({
      tag,
      t: start + i * step,
      value: Number((level(i) + sd * rng.normal()).toFixed(4)),
    }));

  const steamMark = T0 - 12 * HOUR;
  const energyMark = T0 - 3 * HOUR;
  const samples = [
    ...series(STEAM, steamMark - 150 * HOUR, HOUR, 162, (i) => (i < 150 ? 2.4 : 2.2), 0.05),
    ...series(MOISTURE, T0 - 160 * HOUR, HOUR, 160, () => 4.0, 0.1),
    ...series(PURITY, T0 - 30 * HOUR, 10 * MINUTE, 157, () => 99.2, 0.05),
    ...series(ENERGY, energyMark - 150 * HOUR, HOUR, 153, (i) => (i < 150 ? 3.0 : 2.9), 0.1),
  ];
  for (let i = 0; i < samples.length; i += 1000)
    await send('/api/v1/samples', samples.slice(i, i + 1000));

  const describe = [
    [STEAM, 't/t', 'Steam per tonne of water evaporated'],
    [MOISTURE, '%', 'Dryer outlet moisture'],
    [PURITY, '%', 'Product purity, line 2'],
    [ENERGY, 'GJ/t', 'Kiln energy per tonne of clinker'],
  ] as const;
  for (const [tag, unit, description] of describe) {
    // A quiet watch: these tests are about marks and the page, not the tags' own false alarms.
    await send(
      `/api/v1/tags/${encodeURIComponent(tag)}`,
      { unit, description, settings: { inControlArl: 1e7 } },
      'PATCH',
    );
  }
  // Marks before the first analysis, as if they had been made on the day: the watch without a
  // mark would otherwise see the steam tag's fall first and call it a shift nobody marked.
  const steamTrap = (await send('/api/v1/marks', {
    tags: [STEAM],
    at: steamMark,
    label: 'New steam trap',
    note: 'Trap on the first effect replaced.',
    direction: 'fall',
  })) as { id: string };
  const burner = (await send('/api/v1/marks', {
    tags: [ENERGY],
    at: energyMark,
    label: 'Burner retune',
    direction: 'fall',
  })) as { id: string };
  await running.drain();
  running.start();
  return {
    api,
    analyser: running,
    base,
    marks: { steamTrap: steamTrap.id, burner: burner.id },
    moistureChangeAt: T0 - 30 * HOUR,
    async close() {
      await running.close();
      await api.close();
    },
  };
}
