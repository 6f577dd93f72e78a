/**
 * Speed of the pure Sparkplug B core: decoded metrics per second through the session (decode,
 * alias lookup, value and time reading, checkSample) for DATA messages of 50 aliased metrics, set
 * against plain protobufjs decoding of the same bytes in the same run, because this machine is
 * shared and its absolute speed varies. Run with `npx tsx test/bench/sparkplug.bench.ts`.
 */
import { writeFileSync } from 'node:fs';
import { cpus, loadavg, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import {
  createSparkplugSession,
  decodeSparkplugPayload,
  encodeSparkplugPayload,
  type MetricInput,
  SparkplugDataType as DT,
} from '@trueshift/sparkplug';
import { seededRandom } from '@trueshift/stats';

const METRICS = 50;
// A multiple of 256, so seq ends where the next run's first message continues it without a gap.
const MESSAGES = 2048;
const RUNS = 15;
const T0 = Date.UTC(2026, 0, 1);

function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? 0) + (sorted[mid] ?? 0)) / 2;
}

function timeMs(run: () => number): number {
  const times: number[] = [];
  let sink = 0;
  for (let r = 0; r < RUNS; r++) {
    const start = process.hrtime.bigint();
    sink += run();
    times.push(Number(process.hrtime.bigint() - start) / 1e6);
  }
  if (sink < 0) console.log('');
  return median(times);
}

interface Mix {
  label: string;
  datatypes: number[];
}

const mixes: Mix[] = [
  { label: '50 Double', datatypes: Array<number>(METRICS).fill(DT.Double) },
  {
    label: '30 Double, 10 Float, 5 Int32, 5 Boolean',
    datatypes: [
      ...Array<number>(30).fill(DT.Double),
      ...Array<number>(10).fill(DT.Float),
      ...Array<number>(5).fill(DT.Int32),
      ...Array<number>(5).fill(DT.Boolean),
    ],
  },
];

function valueOf(datatype: number, x: number): MetricInput {
  switch (datatype) {
    case DT.Float:
      return { floatValue: Math.round(x * 100) / 100 };
    case DT.Int32:
      return { intValue: Math.round(x * 10) - 500 };
    case DT.Boolean:
      return { booleanValue: x > 50 };
    default:
      return { doubleValue: x };
  }
}

const lines: string[] = [];
const say = (line: string): void => {
  console.log(line);
  lines.push(line);
};

say('# Sparkplug B ingest core benchmark');
say('');
say(
  `Machine: ${cpus()[0]?.model ?? 'unknown CPU'}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}.`,
);
say(
  `Load average when it started: ${loadavg()
    .map((x) => x.toFixed(1))
    .join(
      ', ',
    )} (1, 5, 15 min); the machine is shared, so compare the ratios, not the absolute figures.`,
);
say(
  `Each run takes ${MESSAGES} NDATA messages of ${METRICS} metrics sent by alias only (no name, no datatype), each with its own timestamp; medians of ${RUNS} runs. The baseline is protobufjs decoding the same bytes and nothing else.`,
);
say('');
say(
  '| metrics per message | session (ms per run) | metrics per second | plain decode (ms) | decoded metrics per second | ratio to plain decode |',
);
say('| --- | ---: | ---: | ---: | ---: | ---: |');

for (const mix of mixes) {
  const random = seededRandom(7);
  const session = createSparkplugSession({ groups: ['Bench'] });
  const birth = encodeSparkplugPayload({
    timestamp: T0,
    seq: 0,
    metrics: [
      { name: 'bdSeq', datatype: DT.Int64, longValue: 0, timestamp: T0 },
      ...mix.datatypes.map((datatype, i) => ({
        name: `Area ${i % 5}/Loop ${i}/PV`,
        alias: i + 1,
        datatype,
        timestamp: T0,
        ...valueOf(datatype, 50),
      })),
    ],
  });
  const ctx = { receivedAt: T0 + 1e9, now: T0 + 1e9 };
  session.handle('spBv1.0/Bench/NBIRTH/Edge', birth, ctx);
  const messages = Array.from({ length: MESSAGES }, (_, m) =>
    encodeSparkplugPayload({
      timestamp: T0 + m * 1000,
      seq: (m + 1) % 256,
      metrics: mix.datatypes.map((datatype, i) => ({
        alias: i + 1,
        timestamp: T0 + m * 1000,
        ...valueOf(datatype, 50 + 10 * random.uniform()),
      })),
    }),
  );
  const topic = 'spBv1.0/Bench/NDATA/Edge';
  const throughSession = (): number => {
    let samples = 0;
    for (const bytes of messages) {
      const result = session.handle(topic, bytes, ctx);
      samples += result.samples.length;
      if (result.rejected.length > 0 || result.events.length > 0) {
        throw new Error(`unexpected: ${JSON.stringify(result.rejected[0] ?? result.events[0])}`);
      }
    }
    return samples;
  };
  const plainDecode = (): number => {
    let metrics = 0;
    for (const bytes of messages) metrics += decodeSparkplugPayload(bytes).metrics.length;
    return metrics;
  };
  if (throughSession() !== MESSAGES * METRICS) throw new Error('metrics went missing');
  for (let i = 0; i < 3; i++) {
    throughSession();
    plainDecode();
  }
  const sessionMs = timeMs(throughSession);
  const decodeMs = timeMs(plainDecode);
  const total = MESSAGES * METRICS;
  say(
    `| ${mix.label} | ${sessionMs.toFixed(1)} | ${(total / (sessionMs / 1000)).toExponential(2)} | ${decodeMs.toFixed(1)} | ${(total / (decodeMs / 1000)).toExponential(2)} | ${(sessionMs / decodeMs).toFixed(1)} |`,
  );
}

const out = fileURLToPath(new URL('./results/sparkplug.md', import.meta.url));
writeFileSync(out, `${lines.join('\n')}\n`);
console.log(`\nwritten to ${out}`);
