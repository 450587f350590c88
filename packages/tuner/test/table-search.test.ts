import { describe, expect, it } from 'vitest';
import type { Settings } from '../src/cell-spec.js';
import { overlaps, placeLabels, scatterSvg } from '../src/chart-svg.js';
import type { TableInfo } from '../src/table-info.js';
import { tableArrivals } from '../src/table-load.js';
import { RecordCycle, type RecordSet } from '../src/table-records.js';
import {
  ceilingOf,
  firstRound,
  fitWriteCost,
  judge,
  niceNumber,
  recommend,
  secondRound,
  settingsKey,
} from '../src/table-search.js';
import type { TableTrial, WriteSums } from '../src/table-trial.js';

const settings = (maxRecords: number, maxAgeMs: number, concurrency = 1): Settings => ({
  maxRecords,
  maxAgeMs,
  idleMs: maxAgeMs,
  concurrency,
});

function trial(s: Settings, p99Ms: number, storeMsPerRecord: number, extra: Partial<TableTrial> = {}) {
  const sums: WriteSums = { count: 0, records: 0, ms: 0, recordsSq: 0, recordsMs: 0 };
  return {
    settings: s,
    offered: 1000,
    offeredRate: 1000,
    durable: 1000,
    deadLettered: 0,
    stuck: 0,
    throughput: 1000,
    p50Ms: p99Ms / 2,
    p99Ms,
    maxMs: p99Ms,
    writesPerSecond: 1000 / s.maxRecords,
    meanBatch: s.maxRecords,
    storeMsPerRecord,
    writeP99Ms: 5,
    backpressureMs: 0,
    sums,
    scheduled: 1000,
    ...extra,
  };
}

/** Sums of writes whose time is exactly a + b·n. */
function linearSums(a: number, b: number, sizes: number[]): WriteSums {
  const s: WriteSums = { count: 0, records: 0, ms: 0, recordsSq: 0, recordsMs: 0 };
  for (const n of sizes) {
    const ms = a + b * n;
    s.count++;
    s.records += n;
    s.ms += ms;
    s.recordsSq += n * n;
    s.recordsMs += n * ms;
  }
  return s;
}

describe('the table search', () => {
  it('rounds batch sizes to 1, 2 or 5 times a power of ten', () => {
    expect([0.3, 1, 3, 7, 12, 180, 260, 4000].map(niceNumber)).toEqual([1, 1, 2, 5, 10, 200, 200, 5000]);
  });

  it('tries three ages around the target and batch sizes around what arrives in one age', () => {
    const round = firstRound(200, 1000);
    expect([...new Set(round.map((s) => s.maxAgeMs))]).toEqual([20, 50, 100]);
    // 1000 records/s for 50 ms is 50 records: a quarter, once and four times that.
    expect(round.filter((s) => s.maxAgeMs === 50).map((s) => s.maxRecords)).toEqual([10, 50, 200]);
    expect(round.every((s) => s.concurrency === 1 && s.idleMs === s.maxAgeMs)).toBe(true);
  });

  it('varies concurrency and the idle flush around the best settings, never trying one twice', () => {
    const tried = new Set([settingsKey(settings(50, 50))]);
    const next = secondRound([settings(50, 50)], 4, tried);
    expect(next.map((s) => [s.concurrency, s.idleMs])).toEqual([
      [2, 50],
      [4, 50],
      [1, 10],
    ]);
    expect(secondRound([settings(50, 50)], 4, tried)).toEqual([]);
  });

  it('recovers the fixed and per-record cost of writes that follow a line', () => {
    const cost = fitWriteCost([linearSums(4, 0.05, [10, 50, 100]), linearSums(4, 0.05, [200, 400])]);
    expect(cost.fixedMs).toBeCloseTo(4, 6);
    expect(cost.perRecordMs).toBeCloseTo(0.05, 6);
    expect(cost.writes).toBe(5);
    // Full batches of 100 take 9 ms: 100 / 9 ms ≈ 11,111 records/s on one connection, twice on two.
    expect(ceilingOf(settings(100, 50), cost)).toBe(11_111);
    expect(ceilingOf(settings(100, 50, 2), cost)).toBe(22_222);
  });

  it('recommends the least store cost among the settings that meet the aim, not the fastest', () => {
    const cost = { fixedMs: 2, perRecordMs: 0.01, writes: 10 };
    const target = { p99Ms: 100, headroom: 0.25, rate: 1000 };
    const ranked = judge(
      [
        trial(settings(10, 10), 20, 0.3), // fast but costly
        trial(settings(100, 50), 70, 0.05), // the cheapest that meets 75 ms
        trial(settings(500, 90), 95, 0.02), // cheaper still, but over the aim
        trial(settings(200, 50), 60, 0.01, { deadLettered: 3 }), // records refused
      ],
      cost,
      target,
    );
    expect(ranked.map((t) => t.meets)).toEqual([true, true, false, false]);
    expect(ranked[2]!.why[0]).toContain('> 75 ms');
    expect(ranked[3]!.why[0]).toContain('refused');
    expect(recommend(ranked)?.settings).toEqual(settings(100, 50));
  });

  it('turns down a setting whose estimated ceiling leaves no headroom over the rate', () => {
    const cost = { fixedMs: 10, perRecordMs: 0, writes: 10 };
    // 5 records per 10 ms write: a ceiling of 500 records/s at a rate of 1000.
    const [t] = judge([trial(settings(5, 10), 20, 2)], cost, { p99Ms: 100, headroom: 0.25, rate: 1000 });
    expect(t!.meets).toBe(false);
    expect(t!.why.join()).toContain('ceiling 500/s');
  });
});

describe('the records of a table trial', () => {
  const table: TableInfo = {
    schema: 'public',
    name: 'dock_status',
    oid: 1,
    columns: [
      {
        name: 'id',
        type: 'bigint',
        typeName: 'int8',
        notNull: true,
        defaultExpr: undefined,
        identity: '',
        generated: false,
      },
      {
        name: 'station',
        type: 'text',
        typeName: 'text',
        notNull: true,
        defaultExpr: undefined,
        identity: '',
        generated: false,
      },
      {
        name: 'bikes',
        type: 'integer',
        typeName: 'int4',
        notNull: true,
        defaultExpr: undefined,
        identity: '',
        generated: false,
      },
    ],
    uniqueKeys: [['id'], ['station']],
    indexes: [],
    checks: [],
    foreignKeys: [],
    triggers: [],
    estimatedRows: 0,
    partitioned: false,
    unlogged: false,
  };
  const set: RecordSet = {
    source: 'sample.ndjson',
    columns: ['id', 'station', 'bikes'],
    types: ['bigint', 'text', 'integer'],
    rows: [
      [1, 'a', 5],
      ['3', 'b', 5],
    ],
    ignored: [],
    defaulted: [],
  };

  it('changes unique columns on every pass over the sample so that inserts of later passes do not collide', () => {
    const cycle = new RecordCycle(set, table, { mode: 'insert' });
    const rows = Array.from({ length: 6 }, () => cycle.next());
    expect(rows.map((r) => String(r[0]))).toEqual(['1', '3', '4', '6', '7', '9']);
    expect(rows.map((r) => r[1])).toEqual(['a', 'b', 'a#1', 'b#1', 'a#2', 'b#2']);
    expect(new Set(rows.map((r) => r[0])).size).toBe(6);
    expect(rows.map((r) => r[2])).toEqual([5, 5, 5, 5, 5, 5]);
  });

  it('keeps the upsert key as it is, so that later passes update the same rows', () => {
    const cycle = new RecordCycle(set, table, { mode: 'upsert', key: ['id'] });
    const rows = Array.from({ length: 4 }, () => cycle.next());
    expect(rows.map((r) => r[0])).toEqual([1, '3', 1, '3']);
    expect(cycle.variedColumns.map((v) => v.name)).toEqual(['station']);
  });

  it('replays recorded offsets in order, scaled to the asked rate, and goes round again', () => {
    const times = [0, 100, 300];
    // Real time: 0, 100, 300, then the next lap after the recording's span plus one mean gap (450 ms).
    expect([
      ...tableArrivals(
        { shape: 'replay', rate: 1, durationMs: 800, seed: 1 },
        { timesMs: times, scale: 1, startRow: 0 },
      ),
    ]).toEqual([0, 100, 300, 450, 550, 750]);
    // Twice as fast, starting at the second row.
    expect([
      ...tableArrivals(
        { shape: 'replay', rate: 1, durationMs: 300, seed: 1 },
        { timesMs: times, scale: 0.5, startRow: 1 },
      ),
    ]).toEqual([0, 100, 175, 225]);
  });
});

describe('the chart of p99 against store cost', () => {
  it('places labels of crowded points so that no two overlap and none covers a point', () => {
    // Twelve settings on top of one another, as close settings often land.
    const anchors = Array.from({ length: 12 }, (_, i) => ({
      px: 300 + (i % 3),
      py: 200 + (i % 4),
      label: `${[100, 1000, 10][i % 3]}/25/25/c${1 + (i % 2)}`,
    }));
    const boxes = placeLabels(anchors, { x: 70, y: 40, w: 670, h: 390 });
    for (let i = 0; i < boxes.length; i++)
      for (let j = i + 1; j < boxes.length; j++) expect(overlaps(boxes[i]!, boxes[j]!)).toBe(false);
    for (const b of boxes)
      for (const a of anchors) expect(overlaps(b, { x: a.px - 4, y: a.py - 4, w: 8, h: 8 })).toBe(false);
  });

  it('draws one point and one label per setting, and the target line', () => {
    const { svg, labels } = scatterSvg({
      title: 'public.dock_status',
      xLabel: 'store time per record, µs',
      yLabel: 'p99, ms',
      points: [
        { x: 50, y: 80, label: '100/25/25/c1', highlight: true },
        { x: 51, y: 81, label: '1000/25/25/c1' },
        { x: 300, y: 20, label: '10/25/25/c1', fails: true },
      ],
      lines: [
        { y: 100, label: 'target 100 ms' },
        { y: 75, label: 'aim 75 ms' },
      ],
    });
    expect(svg.match(/<circle /g)).toHaveLength(3);
    expect(svg).toContain('>target 100 ms</text>');
    expect(svg).toContain('>1000/25/25/c1</text>');
    expect(overlaps(labels[0]!, labels[1]!)).toBe(false);
  });
});
