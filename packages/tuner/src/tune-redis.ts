// tuneRedis(): picks batch settings with the user's own Redis key template and mapping, the
// user's records, rate and arrival shape, on scratch keys under a prefix of the tune's own (the
// user's keys are never written), then checks the pick with one more run.
import { invalidOption } from '@spillway/core/kit';
import type { Row } from '@spillway/ingest';
import type { Redis } from 'ioredis';
import { cannotConnect, redactUrl } from './cannot-connect.js';
import { interruption } from './interrupt.js';
import type { RecordSample } from './record-sample.js';
import {
  checkMapping,
  deletePrefix,
  mappingNeeds,
  parseKeyTemplate,
  type RedisMappingKind,
  type RedisMappingSpec,
  scratchMapping,
  scratchPrefix,
  writtenFields,
} from './redis-keys.js';
import type { SearchOutcome } from './search.js';
import { checkSearchOptions, type SearchOptions } from './search-options.js';
import { searchStore } from './store-search.js';
import { planLoad, type TableShape } from './table-load.js';

export type { RedisMappingKind, RedisMappingSpec } from './redis-keys.js';

export interface RedisTuneOptions extends SearchOptions, Omit<RedisMappingSpec, 'kind'> {
  /** redis://… of the server the sink will write to (a standalone server). */
  url: string;
  /** The key template: text and `{field}` placeholders filled from each record. @example 'tandem:dock:{dock_id}' */
  key: string;
  /** The mapping the sink will use (@spillway/redis' ready-made ones). @default 'hash' */
  mapping?: RedisMappingKind;
  /** Send each batch as one MULTI/EXEC, as `redisAdapter({ atomic: true })`. @default false */
  atomic?: boolean;
  /** A CSV or NDJSON file of the user's records (required). */
  sample: string;
}

export interface RedisTuneOutcome extends SearchOutcome {
  store: 'redis';
  server: string;
  /** The user's key template. */
  key: string;
  /** What every scratch key started with (all deleted afterwards). */
  scratchPrefix: string;
  mapping: RedisMappingSpec;
  atomic: boolean;
  records: { source: string; rows: number; fields: string[] };
  /** What the scratch keys do not have. */
  lacks: string[];
  load: { shape: TableShape; rate: number; trialMs: number };
}

function check(o: RedisTuneOptions) {
  if (typeof o.url !== 'string' || !/^rediss?:\/\//i.test(o.url))
    throw invalidOption('url', 'a redis:// URL', o.url);
  const key = parseKeyTemplate(o.key);
  if (typeof o.sample !== 'string' || o.sample === '')
    throw invalidOption('sample', 'a CSV or NDJSON file of your records (--sample)', o.sample);
  if (o.atomic !== undefined && typeof o.atomic !== 'boolean')
    throw invalidOption('atomic', 'a boolean', o.atomic);
  const spec: RedisMappingSpec = {
    kind: o.mapping ?? 'hash',
    fields: o.fields,
    value: o.value,
    member: o.member,
    score: o.score,
    by: o.by,
    ttlMs: o.ttlMs,
    maxLen: o.maxLen,
  };
  checkMapping(spec);
  return { key, spec, search: checkSearchOptions(o) };
}

/**
 * Measures batch settings with the user's key template and mapping on scratch keys (every key
 * under `spillway-tune:<random>:`), deleted between trials, at the end, on an error and on
 * SIGINT / SIGTERM, and recommends the setting that meets the p99 target with headroom at the
 * least store time per record.
 */
export async function tuneRedis(o: RedisTuneOptions): Promise<RedisTuneOutcome> {
  const { key, spec, search } = check(o);
  const started = performance.now();
  const note = (text: string) => o.onProgress?.({ kind: 'note', text });
  const [{ Redis: RedisClient }, { redisAdapter }, { loadRecords, SampleCycle }] = await Promise.all([
    import('ioredis'),
    import('@spillway/redis'),
    import('./record-sample.js'),
  ]);
  const sample: RecordSample = await loadRecords(o.sample, mappingNeeds(spec, key), o.timestampColumn);
  const load = planLoad(o, sample.timesMs);
  const fields = writtenFields(spec, key, sample.fields);
  // The mapping as it ran, for the report: the options given, and the fields a hash or stream wrote.
  const given = Object.entries(spec).filter(([, v]) => v !== undefined);
  const mapping = {
    ...Object.fromEntries(given),
    ...(spec.kind === 'hash' || spec.kind === 'stream' ? { fields } : {}),
  } as RedisMappingSpec;

  const stop = interruption(o, 'the scratch keys were deleted');
  const client: Redis = new RedisClient(o.url, {
    lazyConnect: true,
    maxRetriesPerRequest: 3,
    connectionName: 'spillway-tune',
  });
  // ioredis reports why a connection failed here; connect() itself only says it closed.
  let lastError: unknown;
  client.on('error', (e) => (lastError = e));
  const prefix = scratchPrefix();
  let wrote = false;
  try {
    await client.connect().catch((e: unknown) => {
      throw cannotConnect(`Redis at ${redactUrl(o.url)}`, lastError ?? e);
    });
    const info = await client.info('server');
    const server = `Redis ${/redis_version:(\S+)/.exec(info)?.[1] ?? '?'}`;
    stop.halt();
    wrote = true;
    note(`Scratch keys: ${prefix}<your key> (deleted at the end, on an error and on Ctrl-C).`);
    const adapter = redisAdapter<Row>({
      client,
      mapping: await scratchMapping(spec, key, fields, prefix),
      ...(o.atomic !== undefined ? { atomic: o.atomic } : {}),
    });
    const cycle = new SampleCycle(sample.rows);
    const outcome = await searchStore({
      options: o,
      search,
      load,
      started,
      stop,
      adapter,
      cycle,
      reset: async () => void (await deletePrefix(client, prefix)),
    });
    return {
      store: 'redis',
      server,
      key: key.text,
      scratchPrefix: prefix,
      mapping,
      atomic: o.atomic ?? false,
      records: { source: sample.source, rows: sample.rows.length, fields: sample.fields },
      lacks: [
        'the values your keys already hold (the scratch keys start empty at each trial)',
        'the other traffic your server serves',
      ],
      ...outcome,
    };
  } finally {
    try {
      if (wrote) await deletePrefix(client, prefix);
    } finally {
      client.disconnect();
      stop.dispose();
    }
  }
}
