import { ar1Series, seededRandom } from '@trueshift/stats';

/**
 * The demo plant, invented by the project: the falling-film evaporator of a dairy that concentrates
 * skim milk. Values are per production shift (8 hours). After 180 days a new clean-in-place sequence
 * went live; it keeps the tubes cleaner, so steam per tonne of water evaporated really falls. On the
 * same day the lab changed how it reads the concentrate's dry solids, which did nothing real.
 */
export interface DemoTag {
  file: string;
  tag: string;
  unit: string;
  description: string;
  direction: 'rise' | 'fall' | 'either';
  /** The before-window the demo uses: 20 days of shifts, a steadier baseline than the after-window. */
  nBefore: number;
  csv: string;
  changeTime: string;
  /** What is true in the simulation, so a reader can judge the verdict. */
  truth: string;
}

const SHIFT_MS = 8 * 3600 * 1000;
const START = Date.UTC(2026, 0, 5, 6);
const HISTORY_SHIFTS = 180 * 3;
const AFTER_SHIFTS = 24;

function toCsv(column: string, values: Float64Array, digits: number): string {
  const rows = [`time,${column}`];
  values.forEach((value, i) => {
    rows.push(`${new Date(START + i * SHIFT_MS).toISOString()},${value.toFixed(digits)}`);
  });
  return `${rows.join('\n')}\n`;
}

// A seed whose draw is typical: the observed fall comes out near the simulated 7.5 kg/t. Other seeds
// show the method's real power: about one in six leaves a 7.5 kg/t fall still unproven after 24 shifts.
export function demoPlant(seed = 5): DemoTag[] {
  const random = seededRandom(seed);
  const total = HISTORY_SHIFTS + AFTER_SHIFTS;
  const changeTime = new Date(START + HISTORY_SHIFTS * SHIFT_MS).toISOString();

  const steam = ar1Series(random, total, 262, 5.5, 0.45);
  for (let i = HISTORY_SHIFTS; i < total; i++) steam[i] = (steam[i] ?? 0) - 7.5;

  const solids = ar1Series(random, total, 48.2, 0.35, 0.3);

  return [
    {
      file: 'evaporator-steam-per-tonne.csv',
      tag: 'evap1_steam_kg_per_t',
      unit: 'kg steam per t water evaporated',
      description: 'Evaporator 1 steam use per tonne of water evaporated, shift mean',
      direction: 'fall',
      nBefore: 60,
      csv: toCsv('evap1_steam_kg_per_t', steam, 2),
      changeTime,
      truth: 'a real fall of 7.5 kg/t from the change on',
    },
    {
      file: 'concentrate-dry-solids.csv',
      tag: 'evap1_solids_pct',
      unit: '% dry solids',
      description: 'Evaporator 1 concentrate dry solids, shift mean of lab readings',
      direction: 'rise',
      nBefore: 60,
      csv: toCsv('evap1_solids_pct', solids, 3),
      changeTime,
      truth: 'no real change: the level stays where it was',
    },
  ];
}
