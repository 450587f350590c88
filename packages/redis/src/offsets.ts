/**
 * Offsets stored with the data (exactly-once from a Kafka bridge). With `storeOffsets`, a batch
 * goes out as one Lua script: it first checks, per source partition, that the stored next offset
 * is at or below the batch's first offset (a compare-and-set, like the PostgreSQL adapter's),
 * then runs every record's commands and stores each partition's next offset in one hash. Redis
 * runs a script as a unit (no other client sees a part of it, and it is replicated and written to
 * the AOF as one transaction), so the data and the offsets land together.
 *
 * A writer whose records someone else already stored (a consumer that lost its partitions, or a
 * second run of a script ioredis sent again after a reconnect) changes nothing, and learns what
 * is stored instead.
 */
import type { RecordMeta } from '@spillway/core';
import {
  kafkaCoordinates,
  type PartitionRange,
  partitionKey,
  repeatedSourceMessages,
  type StoredOffsets,
} from '@spillway/core/kit';
import type { Cluster, Redis } from 'ioredis';
import type { RedisArg, RedisCommand } from './commands.js';

/*
 * KEYS[1]   the offsets hash (KEYS[2…] the data keys, declared for a cluster node's checks)
 * ARGV      P, then P × (field, first offset, next offset); then per record: its partition's
 *           number (1…P, 0 for a record without one), its offset, its command count (-1: the
 *           record was refused before sending), and per command its argument count followed by
 *           the command and its arguments.
 * Returns   {'ahead', stored of partition 1, …, stored of partition P} ('' where none) when some
 *           partition's stored offset is past its first offset in the batch: nothing was run.
 *           Otherwise {'done', n1, error1, n2, error2, …}: the 1-based numbers of the commands
 *           that failed and their error replies.
 * Offsets are compared as decimal strings (length, then text): exact for the whole int64 range,
 * which Lua's doubles are not.
 *
 * A record whose command fails still has its other commands run (Redis does not roll back), and
 * its partition's stored offset stops at that record (as at a record refused before sending), so
 * the record is not skipped when it is written again.
 */
export const OFFSETS_SCRIPT = `local function below(a, b)
  if #a ~= #b then return #a < #b end
  return a < b
end
local parts = tonumber(ARGV[1])
local fields, firsts, nexts = {}, {}, {}
for p = 1, parts do
  local i = 2 + (p - 1) * 3
  fields[p], firsts[p], nexts[p] = ARGV[i], ARGV[i + 1], ARGV[i + 2]
end
if parts > 0 then
  local stored = redis.call('HMGET', KEYS[1], unpack(fields))
  local ahead = false
  for p = 1, parts do
    if stored[p] and below(firsts[p], stored[p]) then ahead = true end
  end
  if ahead then
    local out = {'ahead'}
    for p = 1, parts do out[p + 1] = stored[p] or '' end
    return out
  end
end
local out = {'done'}
local stop = {}
local i = 2 + parts * 3
local n = 0
while i <= #ARGV do
  local p, offset, count = tonumber(ARGV[i]), ARGV[i + 1], tonumber(ARGV[i + 2])
  i = i + 3
  if count < 0 then
    if stop[p] == nil then stop[p] = offset end
    count = 0
  end
  for _ = 1, count do
    local argc = tonumber(ARGV[i])
    local reply = redis.pcall(unpack(ARGV, i + 1, i + argc))
    i = i + argc + 1
    n = n + 1
    if type(reply) == 'table' and reply.err then
      out[#out + 1] = n
      out[#out + 1] = reply
      if p > 0 and stop[p] == nil then stop[p] = offset end
    end
  end
end
if parts > 0 then
  local moved = {}
  for p = 1, parts do
    moved[#moved + 1] = fields[p]
    moved[#moved + 1] = stop[p] or nexts[p]
  end
  redis.call('HSET', KEYS[1], unpack(moved))
end
return out`;

/** One script call: its arguments, and which record each command belongs to. */
export interface ScriptCall {
  readonly args: RedisArg[];
  /** Command number (0-based) → record index in the batch. */
  readonly owner: number[];
  /** The commands in the order the script runs them. */
  readonly commands: RedisCommand[];
  /** The partitions in the order the script numbers them. */
  readonly partitions: PartitionRange[];
  /** Records sent. */
  readonly records: number;
  /** Records left out: below their partition's stored offset. */
  readonly skipped: number;
  /** Every record sent carries Kafka coordinates: a second run of the script changes nothing. */
  readonly guarded: boolean;
}

/** The answer of one script run. */
export type ScriptReply =
  | { readonly kind: 'ahead'; readonly stored: StoredOffsets }
  | { readonly kind: 'done'; readonly errors: ReadonlyArray<{ command: number; error: Error }> };

export class OffsetHash {
  readonly group: string;
  readonly key: string;

  constructor(options: { group: string; key: string }) {
    this.group = options.group;
    this.key = options.key;
  }

  /** The hash field of one partition: `<group>/<topic>/<partition>` (topic names hold no `/`). */
  field(topic: string, partition: number): string {
    return `${this.group}/${topic}/${partition}`;
  }

  /**
   * The script's arguments for the records whose commands are in `lists` (undefined: not sent),
   * leaving out those below `stored` (already in Redis).
   */
  call(
    metas: ReadonlyArray<RecordMeta | undefined>,
    lists: ReadonlyArray<readonly RedisCommand[] | undefined>,
    stored: StoredOffsets | undefined,
  ): ScriptCall {
    const ranges = new Map<string, PartitionRange & { number: number }>();
    const body: RedisArg[] = [];
    const owner: number[] = [];
    const commands: RedisCommand[] = [];
    let records = 0;
    let skipped = 0;
    let guarded = true;
    // A second copy of a source message in this batch lands with its first, never twice.
    const repeated = repeatedSourceMessages(metas);
    for (let i = 0; i < lists.length; i++) {
      const list = lists[i];
      const c = kafkaCoordinates(metas[i]);
      if (list === undefined && c === undefined) continue;
      let number = 0;
      if (c === undefined) guarded = false;
      else {
        const key = partitionKey(c.topic, c.partition);
        const s = stored?.get(key);
        if ((s !== undefined && c.offset < s) || repeated?.has(i)) {
          skipped++;
          continue;
        }
        let r = ranges.get(key);
        if (r === undefined) {
          r = { topic: c.topic, partition: c.partition, first: c.offset, next: c.offset + 1n, number: 0 };
          r.number = ranges.size + 1;
          ranges.set(key, r);
        } else {
          if (c.offset < r.first) r.first = c.offset;
          if (c.offset >= r.next) r.next = c.offset + 1n;
        }
        number = r.number;
      }
      if (list === undefined) {
        // Refused before sending (its mapping failed): its partition's stored offset stops here.
        body.push(number, c!.offset.toString(), -1);
        continue;
      }
      records++;
      body.push(number, c === undefined ? '' : c.offset.toString(), list.length);
      for (const command of list) {
        body.push(command.length, ...command);
        owner.push(i);
        commands.push(command);
      }
    }
    const partitions = [...ranges.values()];
    const head: RedisArg[] = [partitions.length];
    for (const r of partitions)
      head.push(this.field(r.topic, r.partition), r.first.toString(), r.next.toString());
    return { args: head.concat(body), owner, commands, partitions, records, skipped, guarded };
  }

  /** Runs one call; `keys` are the data keys to declare (a cluster node checks them). */
  async run(client: Redis | Cluster, call: ScriptCall, keys: readonly RedisArg[] = []): Promise<ScriptReply> {
    const reply = (await client.eval(
      OFFSETS_SCRIPT,
      1 + keys.length,
      this.key,
      ...keys,
      ...call.args,
    )) as unknown[];
    if (reply[0] === 'ahead') {
      const stored: StoredOffsets = new Map();
      call.partitions.forEach((r, k) => {
        const v = reply[k + 1];
        if (typeof v === 'string' && v !== '') stored.set(partitionKey(r.topic, r.partition), BigInt(v));
      });
      return { kind: 'ahead', stored };
    }
    const errors: Array<{ command: number; error: Error }> = [];
    for (let k = 1; k + 1 < reply.length; k += 2)
      errors.push({ command: Number(reply[k]) - 1, error: reply[k + 1] as Error });
    return { kind: 'done', errors };
  }

  /** The stored next offsets of `partitions` (those with none stored are absent). */
  async read(
    client: Redis | Cluster,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
  ): Promise<StoredOffsets> {
    const out: StoredOffsets = new Map();
    if (partitions.length === 0) return out;
    const values = await client.hmget(this.key, ...partitions.map((p) => this.field(p.topic, p.partition)));
    partitions.forEach((p, k) => {
      const v = values[k];
      if (typeof v === 'string' && v !== '') out.set(partitionKey(p.topic, p.partition), BigInt(v));
    });
    return out;
  }
}
