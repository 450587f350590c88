/**
 * `spillway demo`: the Tandem Bikes day, end to end. Dock events flow through one sink per store;
 * the view shows the buffers live; at the end (or on Ctrl-C, through the shutdown coordinator)
 * every sink is flushed and closed and each store is checked against what was produced.
 */
import { rm } from 'node:fs/promises';
import { createServer, type Server } from 'node:http';
import { messageOf, type ShutdownCoordinator, type SinkSnapshot, SpillwayError } from '@spillway/core';
import { PrometheusExporter } from '@spillway/prometheus';
import { type EmbeddedPostgres, startEmbeddedPostgres } from './embedded-postgres-server.js';
import { type DemoOptions, resolveDemoOptions } from './options.js';
import { makeRunDir, removeStaleRunDirs } from './run-dir.js';
import { type DockEvent, Scenario } from './scenario.js';
import {
  DEMO_SINK_SETTINGS,
  type DemoStore,
  kafkaStore,
  metaOf,
  postgresStore,
  redisStore,
  type Verification,
} from './stores.js';
import { type DemoView, fmt, liveView, ms, plainView, type ViewState } from './view.js';

/** Where the demo writes: a stream, and whether it is a terminal. */
export interface DemoOutput {
  readonly stream: NodeJS.WritableStream;
  readonly isTTY: boolean;
  /** Lines from elsewhere (the shutdown coordinator) go through here, above the live view. */
  log(line: string): void;
  /** Set by the demo while a view is active. */
  view: DemoView | undefined;
}

export function demoOutput(stream: NodeJS.WritableStream & { isTTY?: boolean }): DemoOutput {
  const out: DemoOutput = {
    stream,
    isTTY: stream.isTTY === true,
    view: undefined,
    log(line) {
      if (out.view) out.view.log(line);
      else stream.write(`${line}\n`);
    },
  };
  return out;
}

export interface DemoStoreResult {
  readonly name: string;
  readonly snapshot: SinkSnapshot;
  readonly verification: Verification;
}

export interface DemoResult {
  readonly ok: boolean;
  readonly produced: number;
  readonly elapsedMs: number;
  readonly stores: readonly DemoStoreResult[];
}

const TICK_MS = 10;

export async function runDemo(
  input: DemoOptions,
  coordinator: ShutdownCoordinator,
  out: DemoOutput,
): Promise<DemoResult> {
  const o = resolveDemoOptions(input);
  const say = (line = '') => out.log(line);
  // Dead-letter files of runs that were killed before they could remove them.
  await removeStaleRunDirs();
  const runDir = await makeRunDir();
  coordinator.add('clients', 'demo temp files', () => rm(runDir, { recursive: true, force: true }));

  say(`Tandem Bikes — a day of dock events compressed into ${Math.round(o.durationMs / 1000)} s`);
  say('');

  let postgresUrl = o.postgresUrl;
  let embedded: EmbeddedPostgres | undefined;
  if (!postgresUrl) {
    say('  postgres  no URL given: starting an embedded PostgreSQL (nothing to install) …');
    embedded = await startEmbeddedPostgres();
    const server = embedded;
    coordinator.add('clients', 'embedded PostgreSQL', async () => {
      await server.stop();
      out.log('  embedded PostgreSQL stopped, its data directory removed');
    });
    postgresUrl = server.url;
  }
  if (coordinator.started)
    throw new SpillwayError('SPILLWAY_SINK_CLOSED', 'The demo was stopped while starting');

  const stores: Array<{ name: string; store: DemoStore }> = [];
  const open = async (name: string, make: () => Promise<DemoStore>) => {
    try {
      const store = await make();
      stores.push({ name, store });
      coordinator.add('clients', `${name} client`, () => store.close());
      return store;
    } catch (error) {
      throw new SpillwayError('SPILLWAY_STORE_ERROR', `Could not open ${name}: ${messageOf(error)}`, {
        cause: error,
      });
    }
  };
  const pgStore = await open('postgres', () => postgresStore(postgresUrl as string, o.schema, runDir));
  say(
    `  postgres  ${embedded ? `embedded PostgreSQL ${embedded.version} on 127.0.0.1:${embedded.port}` : redact(postgresUrl)}`,
  );
  if (embedded) say(`            data in ${embedded.dir} (removed at exit)`);
  say(`            → ${pgStore.where}`);
  if (o.redisUrl) {
    const s = await open('redis', () => redisStore(o.redisUrl as string, o.redisPrefix, runDir));
    say(`  redis     ${redact(o.redisUrl)}`);
    say(`            → ${s.where}`);
  } else {
    say('  redis     off (--redis <url> or SPILLWAY_REDIS_URL)');
  }
  if (o.kafkaBrokers) {
    const s = await open('kafka', () => kafkaStore(o.kafkaBrokers as string[], o.kafkaTopic, runDir));
    say(`  kafka     ${o.kafkaBrokers.join(',')}`);
    say(`            → ${s.where}`);
  } else {
    say('  kafka     off (--kafka <host:port> or SPILLWAY_KAFKA_BROKERS)');
  }
  const s = DEMO_SINK_SETTINGS;
  say(
    `  sinks     maxRecords ${s.maxRecords} · maxAgeMs ${s.maxAgeMs} · idleMs ${s.idleMs} · concurrency ${s.concurrency}`,
  );
  say(`            maxPendingRecords ${s.maxPendingRecords} (then write() waits: backpressure)`);

  const sinks = stores.map((x) => x.store.sink);
  for (const sink of sinks) coordinator.addSink(sink);

  let metricsServer: Server | undefined;
  if (o.metricsPort !== undefined) {
    const exporter = new PrometheusExporter();
    for (const sink of sinks) exporter.add(sink);
    metricsServer = createServer((req, res) => {
      if (req.url !== '/metrics') {
        res.writeHead(404).end();
        return;
      }
      exporter.metrics().then(
        (text) => res.writeHead(200, { 'content-type': exporter.registry.contentType }).end(text),
        (e: unknown) => res.writeHead(500).end(messageOf(e)),
      );
    });
    const server = metricsServer;
    await new Promise<void>((resolve, reject) =>
      server.once('error', reject).listen(o.metricsPort, '127.0.0.1', resolve),
    );
    const address = server.address();
    say(
      `  metrics   http://127.0.0.1:${typeof address === 'object' && address ? address.port : o.metricsPort}/metrics (Prometheus text format)`,
    );
    coordinator.add(
      'clients',
      'metrics endpoint',
      () => new Promise<void>((resolve) => server.close(() => resolve())),
    );
  }
  say('');

  // ------------------------------------------------------------------ the run
  const scenario = new Scenario({ durationMs: o.durationMs, rate: o.rate, seed: o.seed });
  const lastByDock = new Map<string, DockEvent>();
  let produced = 0;
  const started = performance.now();
  const elapsed = () => performance.now() - started;
  const stopSources = new AbortController();

  const view =
    o.view === 'plain' || (o.view === 'auto' && !out.isTTY)
      ? plainView((l) => out.stream.write(`${l}\n`), o.plainEveryMs)
      : liveView(out.stream as NodeJS.WriteStream);
  out.view = view;
  const liveFigures = new Map<string, string>();
  let polling: Promise<unknown> | undefined;
  const poll = () => {
    polling ??= Promise.all(
      stores.map(async ({ name, store }) => {
        if (store.live) liveFigures.set(name, await store.live().catch(() => '?'));
      }),
    ).finally(() => {
      polling = undefined;
    });
    return polling;
  };
  let stopping = false;
  const state = (): ViewState => {
    const t = Math.min(elapsed(), o.durationMs);
    return {
      elapsedMs: elapsed(),
      durationMs: o.durationMs,
      phase: scenario.phaseAt(t).phase.name,
      eventsPerSecond: scenario.rateAt(t),
      produced,
      held: scenario.heldCount,
      sinks: stores.map(({ name, store }) => ({
        name,
        snapshot: store.sink.snapshot(),
        live: liveFigures.get(name),
      })),
      stopping,
    };
  };
  const redraw = setInterval(() => view.update(state()), out.isTTY ? 200 : 250);
  const pollTimer = setInterval(poll, 1000);
  view.update(state());

  const generate = (async () => {
    while (!stopSources.signal.aborted) {
      const t = elapsed();
      for (const e of scenario.due(t, Date.now())) {
        // Stop between events, never inside one: every store gets every event that counts.
        if (stopSources.signal.aborted) return;
        const meta = metaOf(e);
        for (const sink of sinks) if (!sink.tryWrite(e, meta)) await sink.write(e, meta);
        produced++;
        lastByDock.set(e.dockId, e);
      }
      if (t >= o.durationMs) return;
      await new Promise((resolve) => setTimeout(resolve, TICK_MS));
    }
  })();

  let result: DemoResult | undefined;
  coordinator.add('sources', 'dock event generator', async () => {
    stopSources.abort();
    await generate;
    stopping = true;
    view.update(state());
  });
  coordinator.add('progress', 'summary', async () => {
    clearInterval(redraw);
    clearInterval(pollTimer);
    // The last frame shows the stores after every sink closed.
    await poll();
    await poll();
    view.update(state());
    view.stop();
    out.view = undefined;
    const checked: DemoStoreResult[] = [];
    for (const { name, store } of stores) {
      const verification = await store
        .verify({ produced, lastByDock })
        .catch((e: unknown): Verification => ({ ok: false, lines: [`could not check: ${messageOf(e)}`] }));
      checked.push({ name, snapshot: store.sink.snapshot(), verification });
    }
    result = {
      ok: checked.every(
        (c) => c.verification.ok && c.snapshot.pendingRecords === 0 && c.snapshot.deadLettered === 0,
      ),
      produced,
      elapsedMs: elapsed(),
      stores: checked,
    };
    for (const line of summaryLines(result)) say(line);
    if (!result.ok)
      throw new SpillwayError(
        'SPILLWAY_STORE_ERROR',
        'The summary found missing or pending records (see above)',
      );
  });

  await generate.catch((e: unknown) => say(`  generator stopped: ${messageOf(e)}`));
  const report = await coordinator.shutdown('the simulated day is over');
  if (!result) {
    return { ok: false, produced, elapsedMs: elapsed(), stores: [] };
  }
  return report.ok ? result : { ...result, ok: false };
}

/** The end of the run, in plain words. */
export function summaryLines(r: DemoResult): string[] {
  const lines: string[] = [''];
  lines.push(`Summary — ${(r.elapsedMs / 1000).toFixed(1)} s, ${fmt(r.produced)} dock events produced`);
  for (const s of r.stores) {
    const snap = s.snapshot;
    lines.push(
      `  ${s.name.padEnd(9)} written ${fmt(snap.written)} · dead-lettered ${fmt(snap.deadLettered)} · pending ${fmt(snap.pendingRecords)} · retries ${fmt(snap.retries)}`,
    );
    for (const [i, part] of s.verification.lines.entries())
      lines.push(`  ${''.padEnd(9)} ${i === 0 ? (s.verification.ok ? '✓' : '✗') : ' '} ${part}`);
  }
  for (const s of r.stores) {
    const f = s.snapshot.flushes;
    const reasons = (Object.keys(f) as Array<keyof typeof f>)
      .filter((k) => f[k] > 0)
      .map((k) => `${k} ${fmt(f[k])}`);
    lines.push(`  flushes   ${s.name}: ${reasons.join(' · ') || 'none'}`);
    lines.push(
      `            ${s.name}: ${fmt(s.snapshot.batches)} batches, mean ${fmt(s.snapshot.batchRecords.mean)} records`,
    );
  }
  for (const s of r.stores) {
    const a = s.snapshot.acceptToDurableMs;
    const e = s.snapshot.eventToDurableMs;
    lines.push(
      `  latency   ${s.name}: accept→durable p50 ${ms(a.p50)} · p99 ${ms(a.p99)} · max ${ms(a.max)}`,
    );
    // Events the silent district's uplink held reach the store late by design: its outage.
    const held = e.max > a.max + 1000 ? ' (uplink replay)' : '';
    lines.push(`            ${s.name}: event time→durable p99 ${ms(e.p99)} · max ${ms(e.max)}${held}`);
  }
  const stuck = r.stores.filter((s) => s.snapshot.pendingRecords > 0);
  const lost = r.stores.filter((s) => !s.verification.ok);
  lines.push(
    stuck.length === 0
      ? '  nothing stuck: every sink ended with 0 buffered and 0 in flight'
      : `  STUCK: ${stuck.map((s) => `${s.name} ${s.snapshot.pendingRecords} pending`).join(', ')}`,
  );
  lines.push(
    lost.length === 0
      ? '  nothing lost: every store holds exactly what was produced'
      : `  LOST OR EXTRA: ${lost.map((s) => s.name).join(', ')}`,
  );
  lines.push(`Result: ${r.ok ? 'OK' : 'FAILED'}`);
  return lines;
}

/** A URL without its password, for printing. */
function redact(url: string): string {
  try {
    const u = new URL(url);
    if (u.password) u.password = '***';
    return u.toString();
  } catch {
    return '(url)';
  }
}
