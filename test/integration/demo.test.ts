// The `spillway demo` run end to end against real servers: the shared PostgreSQL, Redis and
// Kafka, and the embedded PostgreSQL that a user without a server gets. The counts are taken
// again here, with clients of this test, not only from the demo's own summary.
import { existsSync } from 'node:fs';
import { PassThrough } from 'node:stream';
import { ShutdownCoordinator } from '@spillway/core';
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { type DemoOutput, demoOutput, runDemo } from '../../packages/cli/src/demo/run-demo.js';
import { DISTRICTS, DOCKS_PER_DISTRICT } from '../../packages/cli/src/demo/scenario.js';
import { TABLE } from '../../packages/cli/src/demo/stores.js';
import {
  deleteRedisPrefix,
  redisPrefix,
  services,
  uniqueName,
  withKafka,
  withRedis,
} from '../harness/index.js';

function captured(): { out: DemoOutput; text: () => string } {
  const stream = new PassThrough();
  let text = '';
  stream.setEncoding('utf8').on('data', (chunk: string) => {
    text += chunk;
  });
  return { out: demoOutput(stream), text: () => text };
}

const cleanups: Array<() => Promise<unknown>> = [];
afterAll(async () => {
  for (const c of cleanups.reverse()) await c().catch(() => undefined);
});

describe('spillway demo', () => {
  it('writes every produced event to PostgreSQL, Redis and Kafka and says so in the summary', async () => {
    const { pgUrl, redisUrl, kafkaBrokers } = services();
    const schema = uniqueName('demo');
    const prefix = redisPrefix('demo');
    const kafka = await withKafka();
    cleanups.push(() => kafka.drop());
    const topic = await kafka.topic(6, 'demo');
    const admin = new pg.Client({ connectionString: pgUrl });
    await admin.connect();
    cleanups.push(async () => {
      await admin.query(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
      await admin.end();
    });
    const redis = await withRedis('demo-check');
    cleanups.push(async () => {
      await deleteRedisPrefix(redis.redis, prefix);
      await redis.drop();
    });

    const { out, text } = captured();
    const coordinator = new ShutdownCoordinator({ log: (line) => out.log(line) });
    const result = await runDemo(
      {
        postgresUrl: pgUrl,
        redisUrl,
        kafkaBrokers,
        kafkaTopic: topic,
        schema,
        redisPrefix: prefix,
        durationMs: 8000,
        rate: 0.5,
        view: 'plain',
        plainEveryMs: 1000,
      },
      coordinator,
      out,
    );

    expect(result.ok).toBe(true);
    // The rush-hour phase alone brings well over a thousand events at half rate.
    expect(result.produced).toBeGreaterThan(1000);
    expect(result.stores.map((s) => s.name)).toEqual(['postgres', 'redis', 'kafka']);
    for (const s of result.stores) {
      expect(s.snapshot.written, s.name).toBe(result.produced);
      expect(s.snapshot.pendingRecords, s.name).toBe(0);
      expect(s.snapshot.deadLettered, s.name).toBe(0);
      expect(s.verification.ok, s.name).toBe(true);
    }
    // The day's shape shows in the triggers: bursts leave by size, the trickle by age or idle time.
    const pgFlushes = result.stores[0]?.snapshot.flushes;
    expect(pgFlushes?.size).toBeGreaterThan(0);
    expect((pgFlushes?.age ?? 0) + (pgFlushes?.idle ?? 0)).toBeGreaterThan(0);

    // Counted again by this test: rows written = rows produced.
    const rows = await admin.query<{ n: string; d: string }>(
      `SELECT count(*) AS n, count(DISTINCT event_id) AS d FROM "${schema}"."${TABLE}"`,
    );
    expect(Number(rows.rows[0]?.n)).toBe(result.produced);
    expect(Number(rows.rows[0]?.d)).toBe(result.produced);
    const offsets = await kafka.admin.fetchTopicOffsets(topic);
    expect(offsets.reduce((sum, p) => sum + Number(p.high), 0)).toBe(result.produced);
    let keys = 0;
    let cursor = '0';
    do {
      const [next, found] = await redis.redis.scan(cursor, 'MATCH', `${prefix}dock:*`, 'COUNT', 500);
      cursor = next;
      keys += found.length;
    } while (cursor !== '0');
    expect(keys).toBeGreaterThan(0);
    expect(keys).toBeLessThanOrEqual(DISTRICTS.length * DOCKS_PER_DISTRICT);

    const summary = text();
    expect(summary).toContain(`${result.produced.toLocaleString('en-US')} produced = rows written`);
    expect(summary).toContain('nothing stuck: every sink ended with 0 buffered and 0 in flight');
    expect(summary).toContain('Result: OK');
    // Plain view: progress lines, no cursor movement.
    expect(summary).toMatch(/^\[00:0\d\] .*\| produced \d+ \| postgres: buffered/m);
    expect(summary).not.toContain('\u001b[');
  });

  it('starts an embedded PostgreSQL when no URL is given and removes it afterwards', async () => {
    const { out, text } = captured();
    const coordinator = new ShutdownCoordinator({ log: (line) => out.log(line) });
    const result = await runDemo({ durationMs: 4000, rate: 0.25, view: 'plain' }, coordinator, out);
    expect(result.ok).toBe(true);
    expect(result.produced).toBeGreaterThan(0);
    const summary = text();
    const port = /embedded PostgreSQL [\d.]+ on 127\.0\.0\.1:(\d+)/.exec(summary)?.[1];
    expect(port).toBeDefined();
    expect(summary).toContain('embedded PostgreSQL stopped, its data directory removed');
    expect(summary).toContain('Result: OK');
    // The server is gone: nothing listens on its port any more.
    const probe = new pg.Client({
      host: '127.0.0.1',
      port: Number(port),
      user: 'spillway',
      database: 'postgres',
      connectionTimeoutMillis: 2000,
    });
    await expect(probe.connect()).rejects.toThrow();
    await probe.end().catch(() => undefined);
    const dir = /data in (\S*spillway-demo-pg-\w+)/.exec(summary)?.[1];
    expect(dir).toBeDefined();
    expect(existsSync(dir as string)).toBe(false);
  });
});
