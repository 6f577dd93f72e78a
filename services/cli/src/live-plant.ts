import { seededRandom } from '@trueshift/stats';
import type { SeededRandom } from '@trueshift/stats';
import type { BetterDirection, Direction, TagSettings } from '@trueshift/store';

/**
 * The live demo plant, invented by the project: the same falling-film evaporator of a dairy that
 * concentrates skim milk as the offline demo, now running. Months of history come first, as a
 * historian would replay them; then values arrive live. At the live start a new clean-in-place
 * (CIP) sequence goes into service, which keeps the tubes cleaner so steam per tonne of water
 * evaporated really falls; the lab starts reading the concentrate's dry solids by a new method,
 * which changes nothing real; and, unmarked, a tube in the condensate pre-heater starts to leak, so
 * milk reaches the condensate and its conductivity creeps up.
 *
 * Time is compressed: one production shift, 8 hours in the history, lasts a few seconds live, so
 * the evidence that takes a plant weeks to gather arrives in minutes.
 */

export interface PlantTag {
  name: string;
  unit: string;
  description: string;
  better: BetterDirection;
  /** Sampling in the history. */
  historyIntervalMs: number;
  historyLength: number;
  /** Sampling live, at speed 1. */
  liveIntervalMs: number;
  /** Decimal places published, as the instrument or lab reports them. */
  digits: number;
  /** Analysis settings stored on the tag. */
  settings: TagSettings;
  /** What is true in the simulation, so a reader can judge the verdicts. */
  truth: string;
}

export interface PlantMark {
  tags: string[];
  label: string;
  note: string;
  direction: Direction;
  nBefore: number;
  nAfterCap: number;
}

export interface PlantSample {
  t: number;
  value: number;
}

/** One tag's noise: AR(1) around a level, as plant measurements are rarely independent. */
interface Noise {
  random: SeededRandom;
  level: number;
  sigma: number;
  phi: number;
  deviation: number;
}

const HOUR = 3_600_000;
const SHIFT = 8 * HOUR;

export const STEAM = 'evap1_steam_kg_per_t';
export const SOLIDS = 'evap1_solids_pct';
export const CONDUCTIVITY = 'evap1_condensate_us_cm';

/** The fall in steam per tonne that the new CIP sequence really brings, kg/t. */
const STEAM_FALL = 7;
/**
 * The leak: conductivity starts to creep this long after the live start (at speed 1), rises this
 * much per second, and levels off when the leak stops growing.
 */
export const LEAK_START_MS = 40_000;
const LEAK_RATE_PER_S = 0.025;
const LEAK_RISE = 1.2;

interface TagModel {
  tag: PlantTag;
  level: number;
  sigma: number;
  phi: number;
  /** What the plant adds to the level, live, this long after the live start (at speed 1). */
  effect: (liveMs: number) => number;
}

function models(): TagModel[] {
  // Many live samples an hour: ARL 500 (the service's default) would mean a false alarm every few
  // minutes of demo time, where a plant watching 1-s values would choose a far longer one.
  const fastTag: TagSettings = { inControlArl: 20_000 };
  return [
    {
      tag: {
        name: STEAM,
        unit: 'kg/t',
        description: 'Evaporator 1 steam per tonne of water evaporated, shift mean',
        better: 'lower',
        historyIntervalMs: SHIFT,
        historyLength: 180 * 3,
        liveIntervalMs: 4000,
        digits: 2,
        settings: { kind: 'batch' },
        truth: `a real fall of ${STEAM_FALL} kg/t from the new CIP sequence on`,
      },
      level: 262,
      sigma: 5.5,
      phi: 0.45,
      effect: () => -STEAM_FALL,
    },
    {
      tag: {
        name: SOLIDS,
        unit: '% dry solids',
        description: 'Evaporator 1 concentrate dry solids, shift mean of lab readings',
        better: 'higher',
        historyIntervalMs: SHIFT,
        historyLength: 180 * 3,
        liveIntervalMs: 4000,
        digits: 3,
        settings: { kind: 'batch' },
        truth: 'no real change: the new lab method reads the same level',
      },
      level: 48.2,
      sigma: 0.35,
      phi: 0.3,
      effect: () => 0,
    },
    {
      tag: {
        name: CONDUCTIVITY,
        unit: 'µS/cm',
        description: 'Evaporator 1 condensate conductivity',
        better: 'lower',
        historyIntervalMs: 10 * 60_000,
        historyLength: 90 * 144,
        liveIntervalMs: 2000,
        digits: 3,
        settings: { kind: 'batch', ...fastTag },
        truth: 'unmarked: a tube starts to leak and milk creeps into the condensate',
      },
      level: 3.1,
      sigma: 0.18,
      // Probe noise dominates a 2-s reading, so neighbours are only weakly related. The watch
      // charts raw values against a moving-range sigma, which strong autocorrelation makes look
      // smaller than it is: at phi 0.3 it false-alarmed within minutes in most draws.
      phi: 0.1,
      effect: (liveMs) =>
        Math.min(LEAK_RISE, Math.max(0, ((liveMs - LEAK_START_MS) / 1000) * LEAK_RATE_PER_S)),
    },
  ];
}

export const PLANT_MARKS: readonly PlantMark[] = [
  {
    tags: [STEAM],
    label: 'New CIP sequence on evaporator 1',
    note: 'Longer caustic step at a higher flow: cleaner tubes should need less steam per tonne.',
    direction: 'fall',
    // 20 days of shifts: a steadier baseline than the after-window.
    nBefore: 60,
    // 30 shifts, two minutes live: the verdict then stands, within the demo's first minutes.
    nAfterCap: 30,
  },
  {
    tags: [SOLIDS],
    label: 'New lab method for concentrate dry solids',
    note: 'Microwave drying instead of the oven; the reading should not move.',
    direction: 'either',
    nBefore: 60,
    nAfterCap: 30,
  },
];

export interface LivePlant {
  readonly tags: readonly PlantTag[];
  readonly marks: readonly PlantMark[];
  /** Each tag's history, oldest first, ending one history interval before `liveStart`. */
  history(liveStart: number): Map<string, PlantSample[]>;
  /**
   * The next live value of a tag, sampled `liveMs` after the live start in plant time (speed
   * already applied). Values follow on from the history's noise.
   */
  next(tag: string, liveMs: number): number;
}

function draw(noise: Noise): number {
  const value = noise.level + noise.deviation;
  const innovation = noise.sigma * Math.sqrt(1 - noise.phi * noise.phi);
  noise.deviation = noise.phi * noise.deviation + innovation * noise.random.normal();
  return value;
}

function round(value: number, digits: number): number {
  const scale = 10 ** digits;
  return Math.round(value * scale) / scale;
}

/**
 * The plant for one seed. Each tag draws from a random source of its own, so a tag's values do not
 * depend on which other tags there are or in what order they are asked for.
 */
export function createLivePlant(seed: number): LivePlant {
  const all = models();
  const noises = new Map<string, Noise>();
  all.forEach((model, i) => {
    const random = seededRandom(seed * 7919 + i + 1);
    noises.set(model.tag.name, {
      random,
      level: model.level,
      sigma: model.sigma,
      phi: model.phi,
      deviation: model.sigma * random.normal(),
    });
  });
  const byName = new Map(all.map((model) => [model.tag.name, model]));

  const noiseOf = (tag: string): { model: TagModel; noise: Noise } => {
    const model = byName.get(tag);
    const noise = noises.get(tag);
    if (model === undefined || noise === undefined) {
      throw new RangeError(`The demo plant has no tag "${tag}".`);
    }
    return { model, noise };
  };

  return {
    tags: all.map((model) => model.tag),
    marks: PLANT_MARKS,
    history(liveStart) {
      const out = new Map<string, PlantSample[]>();
      for (const model of all) {
        const { noise } = noiseOf(model.tag.name);
        const { historyLength: n, historyIntervalMs: step, digits } = model.tag;
        const samples: PlantSample[] = [];
        for (let i = 0; i < n; i++) {
          samples.push({ t: liveStart - (n - i) * step, value: round(draw(noise), digits) });
        }
        out.set(model.tag.name, samples);
      }
      return out;
    },
    next(tag, liveMs) {
      const { model, noise } = noiseOf(tag);
      return round(draw(noise) + model.effect(liveMs), model.tag.digits);
    },
  };
}
