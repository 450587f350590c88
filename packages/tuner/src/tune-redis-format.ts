// What a Redis tune prints: the key template and mapping it ran, the scratch keys, then the
// search's report (trials, recommendation, validation) with a paste-ready redisAdapter sink.
import { parseKeyTemplate } from './redis-keys.js';
import { fieldExpr, propName, templateLiteral, textExpr } from './snippet-code.js';
import type { RedisTuneOutcome } from './tune-redis.js';
import { n0, searchChart, searchReport } from './tune-table-format.js';

const MAKERS = {
  hash: 'hashFields',
  string: 'stringValue',
  'sorted-set': 'sortedSetMember',
  stream: 'streamEntry',
  counter: 'counter',
} as const;

/** The sink to paste: `new Sink(redisAdapter({ client, mapping }), settings)`, the mapping made like the one measured. */
export function redisOptionsSnippet(o: RedisTuneOutcome): string {
  const best = o.recommended;
  if (!best) return '';
  const s = best.settings;
  const m = o.mapping;
  const maker = MAKERS[m.kind];
  // One field per line, indented to sit inside the mapping's options.
  const entry = (fields: string[]) =>
    `(r) => ({\n${fields.map((f) => `        ${propName(f)}: ${textExpr(f)},`).join('\n')}\n      })`;
  const parts = [`key: (r) => ${templateLiteral(parseKeyTemplate(o.key))},`];
  if (m.kind === 'hash' || m.kind === 'stream') parts.push(`fields: ${entry(m.fields ?? [])},`);
  if (m.kind === 'string')
    parts.push(`value: (r) => ${m.value === undefined ? 'JSON.stringify(r)' : textExpr(m.value)},`);
  if (m.kind === 'sorted-set')
    parts.push(`member: (r) => ${textExpr(m.member!)},`, `score: (r) => Number(${fieldExpr(m.score!)}),`);
  if (m.kind === 'counter')
    parts.push(`by: (r) => ${m.by === undefined ? '1' : `Number(${fieldExpr(m.by)})`},`);
  if (m.ttlMs !== undefined) parts.push(`ttlMs: ${m.ttlMs},`);
  if (m.maxLen !== undefined) parts.push(`maxLen: ${m.maxLen},`);
  return [
    "import { Sink } from '@spillway/core';",
    `import { ${maker}, redisAdapter } from '@spillway/redis';`,
    '',
    `// Tuned for p99 ≤ ${o.target.p99Ms} ms at ${n0(o.load.rate)} records/s (${o.load.shape}), ${m.kind} mapping${o.atomic ? ', MULTI/EXEC' : ''}.`,
    'const sink = new Sink<Record<string, unknown>>(',
    '  redisAdapter({',
    '    client, // your ioredis client',
    `    mapping: ${maker}<Record<string, unknown>>({`,
    ...parts.map((p) => `      ${p}`),
    '    }),',
    ...(o.atomic ? ['    atomic: true,'] : []),
    '  }),',
    `  { maxRecords: ${s.maxRecords}, maxAgeMs: ${s.maxAgeMs}, idleMs: ${s.idleMs}, concurrency: ${s.concurrency} },`,
    ');',
  ].join('\n');
}

/** The whole report as the command prints it. */
export function formatRedisTune(o: RedisTuneOutcome): string {
  const m = o.mapping;
  const what: string[] = [];
  if (m.fields) what.push(`fields ${m.fields.join(', ')}`);
  if (m.kind === 'string') what.push(m.value === undefined ? 'the record as JSON' : `value ${m.value}`);
  if (m.member !== undefined) what.push(`member ${m.member}, score ${m.score}`);
  if (m.kind === 'counter') what.push(m.by === undefined ? 'by 1' : `by ${m.by}`);
  if (m.ttlMs !== undefined) what.push(`ttl ${m.ttlMs} ms`);
  if (m.maxLen !== undefined) what.push(`maxLen ~${m.maxLen}`);
  const out = [
    `Keys ${o.key} on ${o.server}, ${m.kind} mapping (${what.join('; ')})${o.atomic ? ', each batch one MULTI/EXEC' : ', each batch one pipeline'}.`,
    `Measured on scratch keys ${o.scratchPrefix}<your key>, deleted between trials and afterwards; your keys were not written.`,
    'The scratch keys lack:',
    ...o.lacks.map((l) => `  - ${l}`),
    `Records: ${n0(o.records.rows)} records of ${o.records.source}, cycled; fields ${o.records.fields.join(', ')}.`,
    ...searchReport(o, 'on the scratch keys', redisOptionsSnippet(o)),
  ];
  return out.join('\n');
}

/** The chart of p99 against store cost. */
export function redisChart(o: RedisTuneOutcome): string {
  return searchChart(o, `Redis ${o.key}, ${o.mapping.kind}`);
}
