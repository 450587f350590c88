// The user's Redis key template and mapping, as a Redis tune writes them: every key under a scratch
// prefix of its own, so that the user's keys are never written, and the prefix emptied with SCAN
// and UNLINK between trials and at the end.
import { randomBytes } from 'node:crypto';
import { invalidOption } from '@spillway/core/kit';
import type { Row } from '@spillway/ingest';
import type { RedisArg, RedisMapping } from '@spillway/redis';
import type { Redis } from 'ioredis';

/** The ready-made mappings of @spillway/redis a tune can write with. */
export type RedisMappingKind = 'hash' | 'string' | 'sorted-set' | 'stream' | 'counter';
export const REDIS_MAPPINGS: readonly RedisMappingKind[] = [
  'hash',
  'string',
  'sorted-set',
  'stream',
  'counter',
];

/** Which sample fields the mapping takes its parts from (the mapping's own option names). */
export interface RedisMappingSpec {
  kind: RedisMappingKind;
  /** hash, stream: the fields written. @default every field of the sample but those in the key */
  fields?: string[] | undefined;
  /** string: the field whose value is the string. @default the whole record as JSON */
  value?: string | undefined;
  /** sorted-set: the member field. */
  member?: string | undefined;
  /** sorted-set: the score field (numeric). */
  score?: string | undefined;
  /** counter: the field holding the increment. @default 1 per record */
  by?: string | undefined;
  /** string, hash: expiry in ms. */
  ttlMs?: number | undefined;
  /** stream: trim to about this many entries. */
  maxLen?: number | undefined;
}

/** A key template: literal text and `{field}` placeholders filled from the record. */
export interface KeyTemplate {
  text: string;
  /** Literal parts; `fields[i]` goes between `parts[i]` and `parts[i + 1]`. */
  parts: string[];
  fields: string[];
}

/** Parses `tandem:dock:{dock_id}`; throws naming `key` when a brace is stray or a placeholder empty. */
export function parseKeyTemplate(text: string): KeyTemplate {
  const bad = () =>
    invalidOption('key', 'a key template of text and {field} placeholders, e.g. tandem:dock:{dock_id}', text);
  if (typeof text !== 'string' || text === '') throw bad();
  const parts: string[] = [];
  const fields: string[] = [];
  let last = 0;
  for (const m of text.matchAll(/\{([^{}]*)\}/g)) {
    if (m[1] === '') throw bad();
    parts.push(text.slice(last, m.index));
    fields.push(m[1]!);
    last = m.index + m[0].length;
  }
  parts.push(text.slice(last));
  if (parts.some((p) => /[{}]/.test(p))) throw bad();
  return { text, parts, fields };
}

/** A record value as a Redis argument: text and numbers as they are, null as '', objects as JSON. */
export function redisArg(v: unknown): RedisArg {
  if (typeof v === 'string' || typeof v === 'number') return v;
  if (v === null || v === undefined) return '';
  if (Buffer.isBuffer(v)) return v;
  if (typeof v === 'object') return JSON.stringify(v);
  return String(v);
}

export function fillKey(t: KeyTemplate, r: Row): string {
  let out = t.parts[0]!;
  for (let i = 0; i < t.fields.length; i++) out += String(redisArg(r[t.fields[i]!])) + t.parts[i + 1]!;
  return out;
}

/** The sample fields each part of the mapping reads, with the option that names it (for errors). */
export function mappingNeeds(spec: RedisMappingSpec, key: KeyTemplate): { field: string; option: string }[] {
  const out = key.fields.map((field) => ({ field, option: `the key template ${key.text}` }));
  for (const f of spec.fields ?? []) out.push({ field: f, option: 'fields' });
  if (spec.value !== undefined) out.push({ field: spec.value, option: 'value' });
  if (spec.member !== undefined) out.push({ field: spec.member, option: 'member' });
  if (spec.score !== undefined) out.push({ field: spec.score, option: 'score' });
  if (spec.by !== undefined) out.push({ field: spec.by, option: 'by' });
  return out;
}

/** Checks that the options fit the mapping kind; throws a TypeError naming the option. */
export function checkMapping(spec: RedisMappingSpec): void {
  if (!REDIS_MAPPINGS.includes(spec.kind))
    throw invalidOption('mapping', REDIS_MAPPINGS.join(', '), spec.kind);
  const only = (name: keyof RedisMappingSpec, kinds: RedisMappingKind[]) => {
    if (spec[name] !== undefined && !kinds.includes(spec.kind))
      throw invalidOption(name, `given only with mapping ${kinds.join(' or ')}`, spec[name]);
  };
  only('fields', ['hash', 'stream']);
  only('value', ['string']);
  only('member', ['sorted-set']);
  only('score', ['sorted-set']);
  only('by', ['counter']);
  only('ttlMs', ['string', 'hash']);
  only('maxLen', ['stream']);
  if (spec.kind === 'sorted-set' && (spec.member === undefined || spec.score === undefined))
    throw invalidOption(
      spec.member === undefined ? 'member' : 'score',
      'the sample field of the member and of the score (mapping sorted-set)',
      undefined,
    );
  if (spec.fields !== undefined && spec.fields.length === 0)
    throw invalidOption('fields', 'at least one sample field', spec.fields);
  if (spec.ttlMs !== undefined && !(Number.isInteger(spec.ttlMs) && spec.ttlMs > 0))
    throw invalidOption('ttlMs', 'an integer > 0', spec.ttlMs);
  if (spec.maxLen !== undefined && !(Number.isInteger(spec.maxLen) && spec.maxLen >= 0))
    throw invalidOption('maxLen', 'an integer >= 0', spec.maxLen);
}

/** The fields a hash or stream entry gets: those named, or every sample field not in the key. */
export function writtenFields(spec: RedisMappingSpec, key: KeyTemplate, sampleFields: string[]): string[] {
  if (spec.fields) return spec.fields;
  const inKey = new Set(key.fields);
  const rest = sampleFields.filter((f) => !inKey.has(f));
  return rest.length > 0 ? rest : sampleFields;
}

/**
 * The mapping the user's sink would run, made with @spillway/redis' own ready-made mapping of
 * that kind, every key prefixed with `prefix`.
 */
export async function scratchMapping(
  spec: RedisMappingSpec,
  key: KeyTemplate,
  fields: string[],
  prefix: string,
): Promise<RedisMapping<Row>> {
  const m = await import('@spillway/redis');
  const k = (r: Row) => prefix + fillKey(key, r);
  const entry = (r: Row) => {
    const out: Record<string, RedisArg> = {};
    for (const f of fields) out[f] = redisArg(r[f]);
    return out;
  };
  const ttl = spec.ttlMs !== undefined ? { ttlMs: spec.ttlMs } : {};
  switch (spec.kind) {
    case 'hash':
      return m.hashFields<Row>({ key: k, fields: entry, ...ttl });
    case 'string': {
      const field = spec.value;
      return m.stringValue<Row>({
        key: k,
        value: field === undefined ? (r) => JSON.stringify(r) : (r) => String(redisArg(r[field])),
        ...ttl,
      });
    }
    case 'sorted-set': {
      const member = spec.member!;
      const score = spec.score!;
      return m.sortedSetMember<Row>({
        key: k,
        member: (r) => String(redisArg(r[member])),
        score: (r) => Number(r[score]),
      });
    }
    case 'stream':
      return m.streamEntry<Row>({
        key: k,
        fields: entry,
        ...(spec.maxLen !== undefined ? { maxLen: spec.maxLen } : {}),
      });
    case 'counter': {
      const by = spec.by;
      return m.counter<Row>({ key: k, by: by === undefined ? () => 1 : (r) => Number(r[by]) });
    }
  }
}

/** A fresh scratch prefix: `spillway-tune:` and 8 hex digits and `:`. */
export function scratchPrefix(): string {
  return `spillway-tune:${randomBytes(4).toString('hex')}:`;
}

/** Deletes every key under `prefix` (SCAN, never KEYS, so a big server is not blocked); returns how many. */
export async function deletePrefix(client: Redis, prefix: string): Promise<number> {
  let deleted = 0;
  let cursor = '0';
  do {
    const [next, keys] = await client.scan(cursor, 'MATCH', `${prefix}*`, 'COUNT', 1000);
    cursor = next;
    if (keys.length > 0) deleted += await client.unlink(...keys);
  } while (cursor !== '0');
  return deleted;
}
