import { SHAPES, type ShapeName } from '@spillway/tuner';
import { type Plan, parseStore } from './plan.js';

/** Command-line flags that reshape a plan (shared by `npm run bench` and `spillway bench`). */
export interface BenchFlags {
  stores?: string[];
  shapes?: string[];
  maxRecords?: number[];
  maxAge?: number[];
  idle?: number[];
  concurrency?: number[];
  sizeOnly?: number[];
  repeats?: number;
  rate?: number;
  duration?: number;
  fullGrid?: boolean;
}

/** Everything `spillway bench` takes: the grid's flags and where the results go. */
export interface BenchCommandOptions extends BenchFlags {
  quick?: boolean;
  /** Where results.json, charts/ and (by default) RESULTS.md go. */
  out: string;
  markdown?: string;
  /** A saved results.json to redraw the page and charts from, running nothing. */
  reportOnly?: string;
}

/** Applies flags to a plan; a grid flag drops the smaller off-steady grid so the grid asked for runs everywhere. */
export function applyFlags(plan: Plan, o: BenchFlags, env: NodeJS.ProcessEnv = process.env): Plan {
  for (const s of o.shapes ?? []) {
    if (!SHAPES.includes(s as ShapeName))
      throw new TypeError(`Expected shapes among ${SHAPES.join(', ')}, got \`${s}\``);
  }
  const shapes = o.shapes as ShapeName[] | undefined;
  if (o.stores)
    plan.stores = o.stores.map((name) => ({ store: parseStore(name, env), shapes: shapes ?? ['steady'] }));
  else if (shapes) for (const s of plan.stores) s.shapes = shapes;
  if (o.maxRecords) plan.maxRecords = o.maxRecords;
  if (o.maxAge) plan.maxAgeMs = o.maxAge;
  if (o.idle) plan.idleMs = o.idle;
  if (o.concurrency) plan.concurrency = o.concurrency;
  if (o.sizeOnly) plan.sizeOnly = o.sizeOnly;
  if (o.repeats !== undefined) {
    if (!(Number.isInteger(o.repeats) && o.repeats >= 1))
      throw new TypeError(`Expected \`repeats\` to be an integer >= 1, got \`${o.repeats}\``);
    plan.repeats = o.repeats;
  }
  if (o.fullGrid || o.maxRecords || o.maxAge) delete plan.sideGrid;
  for (const shape of SHAPES) {
    const over = { ...plan.shapeOverrides[shape] };
    if (o.duration) over.durationMs = o.duration;
    if (o.rate && shape === 'steady') over.rate = o.rate;
    plan.shapeOverrides[shape] = over;
  }
  return plan;
}
