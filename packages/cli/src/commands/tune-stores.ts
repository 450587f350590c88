// `spillway tune --key-template` (Redis) and `--topic` (Kafka): the flags as the tuner's options.
import type { RedisMappingKind } from '@spillway/tuner';
import { fail, runUserTune, type SearchFlags, searchOptions } from './tune-run.js';

export interface RedisFlags {
  keyTemplate?: string;
  mapping?: RedisMappingKind;
  fields?: string[];
  valueField?: string;
  memberField?: string;
  scoreField?: string;
  byField?: string;
  ttl?: number;
  maxLen?: number;
  atomic?: boolean;
}

export interface KafkaFlags {
  topic?: string;
  messageKey?: string;
  acks?: '-1' | '0' | '1';
  /** false with --no-idempotent. */
  idempotent?: boolean;
  compression?: 'none' | 'gzip';
}

export async function tuneRedisCommand(o: SearchFlags & RedisFlags & { to: string }): Promise<void> {
  const { formatRedisTune, redisChart, tuneRedis } = await import('@spillway/tuner');
  if (!/^rediss?:\/\//i.test(o.to)) return fail('--key-template works with a redis:// --to only', 64);
  if (!o.sample) return fail('--key-template needs --sample <file>: the records your sink will write', 64);
  await runUserTune(
    o,
    (onProgress) =>
      tuneRedis({
        ...searchOptions(o),
        url: o.to,
        key: o.keyTemplate!,
        sample: o.sample!,
        ...(o.mapping ? { mapping: o.mapping } : {}),
        ...(o.fields ? { fields: o.fields } : {}),
        ...(o.valueField ? { value: o.valueField } : {}),
        ...(o.memberField ? { member: o.memberField } : {}),
        ...(o.scoreField ? { score: o.scoreField } : {}),
        ...(o.byField ? { by: o.byField } : {}),
        ...(o.ttl ? { ttlMs: Math.round(o.ttl) } : {}),
        ...(o.maxLen !== undefined ? { maxLen: o.maxLen } : {}),
        ...(o.atomic ? { atomic: true } : {}),
        onProgress,
      }),
    { report: formatRedisTune, chart: redisChart, chartName: (r) => `redis-${r.key}` },
  );
}

export async function tuneKafkaCommand(o: SearchFlags & KafkaFlags & { to: string }): Promise<void> {
  const { formatKafkaTune, kafkaChart, storeFromUrl, tuneKafka } = await import('@spillway/tuner');
  if (!/^kafka:\/\//i.test(o.to)) return fail('--topic works with a kafka://host:port --to only', 64);
  if (!o.sample) return fail('--topic needs --sample <file>: the records your sink will send', 64);
  const brokers = storeFromUrl(o.to).brokers ?? [];
  await runUserTune(
    o,
    (onProgress) =>
      tuneKafka({
        ...searchOptions(o),
        brokers,
        topic: o.topic!,
        sample: o.sample!,
        ...(o.messageKey ? { key: o.messageKey } : {}),
        ...(o.acks ? { acks: Number(o.acks) as -1 | 0 | 1 } : {}),
        ...(o.idempotent === false ? { idempotent: false } : {}),
        ...(o.compression ? { compression: o.compression } : {}),
        onProgress,
      }),
    { report: formatKafkaTune, chart: kafkaChart, chartName: (k) => `kafka-${k.topic.name}` },
  );
}
