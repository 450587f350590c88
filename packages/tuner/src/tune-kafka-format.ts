// What a Kafka tune prints: the user's topic as read from the broker, the scratch topic made like
// it, then the search's report with a paste-ready kafkaProducerAdapter sink.
import { textExpr } from './snippet-code.js';
import type { KafkaTuneOutcome } from './tune-kafka.js';
import { n0, searchChart, searchReport } from './tune-table-format.js';

/** The sink to paste: `new Sink(kafkaProducerAdapter({ kafka, topic, mapper }), settings)`. */
export function kafkaOptionsSnippet(o: KafkaTuneOutcome): string {
  const best = o.recommended;
  if (!best) return '';
  const s = best.settings;
  const key = o.key === undefined ? '' : `key: ${textExpr(o.key)}, `;
  const ordering = o.key !== undefined && s.concurrency > 1;
  return [
    "import { Sink } from '@spillway/core';",
    "import { kafkaProducerAdapter } from '@spillway/kafka';",
    ...(o.compression === 'gzip' ? ["import { CompressionTypes } from 'kafkajs';"] : []),
    '',
    `// Tuned for p99 ≤ ${o.target.p99Ms} ms at ${n0(o.load.rate)} records/s (${o.load.shape}) on a topic like ${o.topic.name}.`,
    'const sink = new Sink<Record<string, unknown>>(',
    '  kafkaProducerAdapter({',
    '    kafka, // your kafkajs client',
    `    topic: ${JSON.stringify(o.topic.name)},`,
    `    mapper: (r) => ({ ${key}value: JSON.stringify(r) }),`,
    ...(o.acks !== -1 ? [`    acks: ${o.acks},`] : []),
    ...(!o.idempotent ? ['    idempotent: false,'] : []),
    ...(o.compression === 'gzip' ? ['    compression: CompressionTypes.GZIP,'] : []),
    '  }),',
    '  {',
    `    maxRecords: ${s.maxRecords},`,
    `    maxAgeMs: ${s.maxAgeMs},`,
    `    idleMs: ${s.idleMs},`,
    `    concurrency: ${s.concurrency},`,
    ...(ordering
      ? [`    orderingKey: (r) => ${textExpr(o.key!)}, // a key's batches never in flight together`]
      : []),
    '  },',
    ');',
  ].join('\n');
}

/** The whole report as the command prints it. */
export function formatKafkaTune(o: KafkaTuneOutcome): string {
  const t = o.topic;
  const configs = t.configs.length > 0 ? t.configs.map((c) => `${c.name}=${c.value}`).join(', ') : 'none';
  const producer = [
    `acks ${o.acks}`,
    o.idempotent ? 'idempotent' : 'not idempotent',
    `compression ${o.compression}`,
    o.key === undefined ? 'no key' : `key ${o.key}`,
  ].join(', ');
  const out = [
    `Topic ${t.name} on ${o.server}: ${t.partitions} partition(s), replication factor ${t.replicationFactor}, topic configs: ${configs}.`,
    `Measured on a scratch topic ${o.scratchTopic} made with the same partitions, replication factor and topic configs, deleted afterwards; your topic was not written.`,
    `Producer: ${producer}.`,
    'The scratch topic lacks:',
    ...o.lacks.map((l) => `  - ${l}`),
    `Records: ${n0(o.records.rows)} records of ${o.records.source}, cycled, each sent as its JSON (${n0(o.records.meanValueBytes)} bytes on average); fields ${o.records.fields.join(', ')}.`,
    ...searchReport(o, 'on the scratch topic', kafkaOptionsSnippet(o)),
  ];
  return out.join('\n');
}

/** The chart of p99 against store cost. */
export function kafkaChart(o: KafkaTuneOutcome): string {
  return searchChart(o, `Kafka ${o.topic.name}`);
}
