import type { CellAggregate } from '@spillway/tuner';
import * as vega from 'vega';
import { compile, type TopLevelSpec } from 'vega-lite';

/** One point of a chart: a cell's medians. */
interface Point {
  /** Colour series (the sink's lines) and shape series (the baselines): separate fields keep two legends. */
  line: string;
  baseline: string;
  variant: string;
  maxRecords: number;
  maxAgeMs: number;
  throughput: number;
  p99: number;
  label: string;
}

function pointsOf(cells: CellAggregate[]): Point[] {
  return cells
    .filter((c) => c.runs.length > 0)
    .map((c) => {
      const s = c.spec.settings;
      const m = c.median;
      const stuck = m.stuckRecords > 0 ? `, ${m.stuckRecords} stuck` : '';
      const series =
        c.spec.variant === 'spillway'
          ? `maxAgeMs ${s.maxAgeMs}`
          : c.spec.variant === 'size-only'
            ? 'size-only (no timer)'
            : 'one write per record';
      const label =
        c.spec.variant === 'per-record'
          ? 'per record'
          : c.spec.variant === 'size-only'
            ? `size-only ${s.maxRecords}${stuck}`
            : `${s.maxRecords}`;
      // A log axis cannot show 0: a cell with nothing measured sits at 0.1 ms.
      return {
        line: series,
        baseline: series,
        variant: c.spec.variant,
        maxRecords: s.maxRecords,
        maxAgeMs: s.maxAgeMs,
        throughput: m.throughput,
        p99: Math.max(0.1, m.p99WithStuck),
        label,
      };
    });
}

/**
 * Throughput against p99 latency for one store and shape: one line per maxAgeMs through the
 * maxRecords values (labelled), the baselines as separate marks.
 */
export function chartSpec(title: string, subtitle: string, cells: CellAggregate[]): TopLevelSpec {
  const values = pointsOf(cells);
  const ageList = [...new Set(values.filter((v) => v.variant === 'spillway').map((v) => v.maxAgeMs))].sort(
    (a, b) => a - b,
  );
  const ages = ageList.map((a) => `maxAgeMs ${a}`);
  const x = {
    field: 'p99',
    type: 'quantitative' as const,
    scale: { type: 'log' as const },
    title: 'p99 accept → durable, ms (log; stuck records counted at their age)',
  };
  const y = {
    field: 'throughput',
    type: 'quantitative' as const,
    title: 'throughput, records/s (median of runs)',
  };
  return {
    $schema: 'https://vega.github.io/schema/vega-lite/v6.json',
    title: { text: title, subtitle },
    width: 560,
    height: 320,
    background: 'white',
    data: { values },
    layer: [
      {
        transform: [{ filter: "datum.variant === 'spillway'" }],
        mark: { type: 'line', point: { filled: true, size: 50 } },
        encoding: {
          x,
          y,
          color: {
            field: 'line',
            type: 'nominal',
            title: 'Spillway sink',
            sort: ages,
            legend: { labelLimit: 240 },
          },
          order: { field: 'maxRecords' },
        },
      },
      // One label layer per line, each lifted a little higher, so labels of points that coincide stay readable.
      ...ageList.map((age, i) => ({
        transform: [{ filter: `datum.variant === 'spillway' && datum.maxAgeMs === ${age}` }],
        mark: { type: 'text' as const, dy: -9 - 10 * i, fontSize: 9, color: '#444' },
        encoding: { x, y, text: { field: 'label' } },
      })),
      {
        transform: [{ filter: "datum.variant !== 'spillway'" }],
        mark: { type: 'point', filled: true, size: 110, strokeWidth: 2 },
        encoding: {
          x,
          y,
          shape: {
            field: 'baseline',
            type: 'nominal',
            title: 'baselines',
            scale: { domain: ['size-only (no timer)', 'one write per record'], range: ['cross', 'diamond'] },
            legend: { labelLimit: 240 },
          },
          color: { value: '#111' },
        },
      },
      // Size-only sits at the right edge (its stuck records are old): label it leftwards.
      {
        transform: [{ filter: "datum.variant === 'per-record'" }],
        mark: { type: 'text', align: 'left', dx: 8, dy: -8, fontSize: 9, color: '#111' },
        encoding: { x, y, text: { field: 'label' } },
      },
      {
        transform: [{ filter: "datum.variant === 'size-only'" }],
        mark: { type: 'text', align: 'right', dx: -8, dy: 12, fontSize: 9, color: '#111' },
        encoding: { x, y, text: { field: 'label' } },
      },
    ],
    padding: { left: 5, top: 5, right: 40, bottom: 5 },
    config: { legend: { orient: 'right', offset: 40 }, view: { stroke: '#ddd' } },
  } as TopLevelSpec;
}

/** Compiles a Vega-Lite spec and renders it to SVG in Node (no canvas needed for SVG). */
export async function renderSvg(spec: TopLevelSpec): Promise<string> {
  const compiled = compile(spec).spec;
  const view = new vega.View(vega.parse(compiled), { renderer: 'none' });
  try {
    return await view.toSVG();
  } finally {
    view.finalize();
  }
}
