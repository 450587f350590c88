// Tandem Bikes: a plain Node `stream.pipeline` of dock status events into a Spillway sink that
// writes them to PostgreSQL with COPY. The source reads as fast as it can; the sink's pending
// bound and the Writable's highWaterMark slow it down (backpressure), and `pipeline` resolves
// only when every event is durable.
//
//   npm run build    # once: the examples import the built packages by name
//   DATABASE_URL=postgres://postgres@127.0.0.1:5432/postgres node --import tsx examples/pipeline-into-sink.ts
//
// Creates (and first drops) the table tandem_example_dock_status in the database it is given.
import { Readable, Transform } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import { toWritable } from '@spillway/core';
import { postgresSink } from '@spillway/postgres';
import pg from 'pg';

interface DockStatus {
  eventId: number;
  dockId: string;
  bikes: number;
  emptySlots: number;
  at: number;
}

const url = process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/postgres';
const events = Number(process.env.EVENTS ?? 20_000);
const table = 'tandem_example_dock_status';

const pool = new pg.Pool({ connectionString: url, max: 4 });
pool.on('error', () => undefined);
await pool.query(`DROP TABLE IF EXISTS ${table}`);
await pool.query(`CREATE TABLE ${table} (
  event_id bigint PRIMARY KEY, dock_id text NOT NULL, bikes int NOT NULL, empty_slots int NOT NULL, seen_at timestamptz NOT NULL)`);

const sink = postgresSink<DockStatus>({
  name: 'dock-status',
  pool,
  table,
  mode: 'copy',
  columns: ['event_id', 'dock_id', 'bikes', 'empty_slots', 'seen_at'],
  map: (e) => [e.eventId, e.dockId, e.bikes, e.emptySlots, new Date(e.at)],
  maxRecords: 1000,
  maxAgeMs: 500,
  // At most 2,000 events accepted and not yet durable: past that, the stream waits.
  maxPendingRecords: 2000,
});
let waits = 0;
sink.on('backpressure', () => waits++);

// The source: raw NDJSON lines as a dock uplink would deliver them.
async function* uplink(): AsyncGenerator<string> {
  for (let i = 1; i <= events; i++) {
    const bikes = (i * 7) % 21;
    yield `${JSON.stringify({ eventId: i, dockId: `DK-${String(i % 144).padStart(4, '0')}`, bikes, emptySlots: 20 - bikes, at: Date.now() })}\n`;
  }
}

const parse = new Transform({
  readableObjectMode: true,
  transform(line: Buffer | string, _encoding, callback) {
    callback(null, JSON.parse(String(line)) as DockStatus);
  },
});

const started = performance.now();
// 'close': the sink closes (flushes everything, reason `shutdown`) when the stream ends.
await pipeline(Readable.from(uplink()), parse, toWritable(sink, { highWaterMark: 64, onFinish: 'close' }));
const seconds = (performance.now() - started) / 1000;

const snap = sink.snapshot();
const rows = Number((await pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${table}`)).rows[0]?.n);
const flushes = Object.entries(snap.flushes)
  .filter(([, n]) => n > 0)
  .map(([reason, n]) => `${reason} ${n}`)
  .join(', ');
console.log(
  `${events} events through stream.pipeline in ${seconds.toFixed(2)} s (${Math.round(events / seconds)} events/s)`,
);
console.log(`rows in ${table}: ${rows} (${rows === events ? 'all of them' : `MISSING ${events - rows}`})`);
console.log(`flushes: ${flushes}; mean batch ${Math.round(snap.batchRecords.mean)} records`);
console.log(`backpressure: the stream waited ${waits} times for room (maxPendingRecords 2000)`);
console.log(
  `accept → durable: p50 ${snap.acceptToDurableMs.p50.toFixed(1)} ms, p99 ${snap.acceptToDurableMs.p99.toFixed(1)} ms`,
);
await pool.end();
process.exitCode = rows === events ? 0 : 1;
