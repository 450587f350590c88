/**
 * The Redis sink adapter: a batch goes out as one pipeline (or one MULTI/EXEC, or with
 * `storeOffsets` one script that also stores the source offsets), and every reply is checked and
 * attributed to the record whose command it answers.
 */
import {
  type Batch,
  type ErrorClass,
  messageOf,
  type PartialWrite,
  type SinkAdapter,
  StoreError,
} from '@spillway/core';
import { invalidOption, partitionKey, type StoredOffsets } from '@spillway/core/kit';
import type { ChainableCommander, Cluster } from 'ioredis';
import { classifyRedisError, isUnknownOutcome, redisErrorPrefix } from './classify.js';
import { commandList, type RedisCommand, type RedisMapping } from './commands.js';
import { OffsetHash, type ScriptReply } from './offsets.js';
import { type RedisAdapterOptions, type ResolvedRedisOptions, resolveRedisOptions } from './options.js';
import { commandKey, refuseInScript, scriptKeys } from './script-checks.js';
import { keySlot } from './slot.js';

/** Counters of the offsets script (`storeOffsets`). They only grow. */
export interface RedisAdapterStats {
  /** Scripts that ran their commands and moved the stored offsets. */
  offsetScripts: number;
  /**
   * Scripts that changed nothing because a partition's stored offset was already past the batch's
   * first record (stored before: by a replay, a stale consumer, or a script ioredis sent twice);
   * the batch was then sent again without the stored records.
   */
  offsetConflicts: number;
  /** Records left out of a batch because the stored offset of their partition was past them, or because the batch holds their source message once more. */
  alreadyStored: number;
}

/** Rounds of "someone stored these already, send the rest" before a batch gives up (and is retried). */
const MAX_OFFSET_ROUNDS = 5;

/** A Lua error of the offsets script itself (not of a command it ran): Redis 6 and 7 wordings. */
const SCRIPT_FAILURE = /user_script:|Error running script/;

type Reply = [error: Error | null, result: unknown];

/** Severity when one record's commands fail differently: the worst reading wins. */
const RANK: Record<ErrorClass, number> = { retry: 0, split: 1, fatal: 2 };

/** A server message without the arguments Redis may echo (they can hold record data). */
function safeMessage(error: unknown): string {
  return messageOf(error).replace(/, with args beginning with:.*$/s, '');
}

export class RedisAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'redis';
  private readonly o: ResolvedRedisOptions<T>;
  /** With `storeOffsets`: the hash of stored offsets and its script. */
  private readonly offsets: OffsetHash | undefined;
  private readonly counters: RedisAdapterStats = { offsetScripts: 0, offsetConflicts: 0, alreadyStored: 0 };

  constructor(options: RedisAdapterOptions<T>) {
    this.o = resolveRedisOptions(options);
    this.offsets = this.o.storeOffsets === undefined ? undefined : new OffsetHash(this.o.storeOffsets);
  }

  /** A copy of the counters (they move only with `storeOffsets`). */
  stats(): RedisAdapterStats {
    return { ...this.counters };
  }

  get mapping(): RedisMapping<T> {
    return this.o.mapping;
  }

  // biome-ignore lint/suspicious/noConfusingVoidType: matches SinkAdapter.write
  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    const { mapping } = this.o;
    // Per record: its commands, or undefined when its mapping failed.
    const lists = new Array<readonly RedisCommand[] | undefined>(batch.records.length);
    // Record index → its worst error so far.
    const failed = new Map<number, StoreError>();
    for (let i = 0; i < batch.records.length; i++) {
      try {
        lists[i] = commandList(mapping, batch.records[i] as T, batch.metas[i]);
      } catch (error) {
        failed.set(
          i,
          new StoreError(`Mapping "${mapping.name}" failed for a record: ${messageOf(error)}`, {
            cause: error,
            details: { mapping: mapping.name, stage: 'mapping' },
          }),
        );
      }
    }
    if (this.offsets !== undefined) await this.writeStored(batch, lists, failed);
    else await this.writePlain(lists, failed);
    if (failed.size === 0) return undefined;
    return { rejected: [...failed].map(([index, error]) => ({ index, error })) };
  }

  /** A pipeline (or MULTI/EXEC) per group of commands; errors land in `failed`. */
  private async writePlain(
    lists: ReadonlyArray<readonly RedisCommand[] | undefined>,
    failed: Map<number, StoreError>,
  ): Promise<void> {
    const { mapping } = this.o;
    const commands: RedisCommand[] = [];
    const owner: number[] = [];
    for (let i = 0; i < lists.length; i++) {
      for (const c of lists[i] ?? []) {
        commands.push(c);
        owner.push(i);
      }
    }
    if (commands.length === 0) return;
    const groups = this.groups(commands);
    await Promise.all(
      groups.map(async (indexes) => {
        const replies = await this.send(
          indexes.map((k) => commands[k]!),
          groups.length === 1,
        );
        for (let j = 0; j < indexes.length; j++) {
          const k = indexes[j]!;
          const error = replies[j]?.[0];
          if (!error) continue;
          const command = commands[k]!;
          if (mapping.isReplay?.(error, command)) continue;
          this.blame(failed, owner[k]!, this.wrap(error, command));
        }
      }),
    );
  }

  /**
   * `storeOffsets`: the batch and its offsets as one script. When the stored offsets are ahead of
   * the batch, nothing ran; the records below them are left out and the rest is sent again.
   */
  private async writeStored(
    batch: Batch<T>,
    lists: Array<readonly RedisCommand[] | undefined>,
    failed: Map<number, StoreError>,
  ): Promise<void> {
    const hash = this.offsets!;
    const { mapping } = this.o;
    refuseInScript(mapping.name, lists, failed);
    let stored: StoredOffsets | undefined;
    for (let round = 1; ; round++) {
      const call = hash.call(batch.metas, lists, stored);
      this.counters.alreadyStored += call.skipped;
      if (call.records === 0) return;
      const keys = scriptKeys(this.o.client as { isCluster?: boolean }, hash.key, mapping.name, call);
      let reply: ScriptReply;
      try {
        reply = await hash.run(this.o.client, call, keys);
      } catch (error) {
        throw this.wrap(error, ['EVAL'], { step: 'offsets', guarded: call.guarded });
      }
      if (reply.kind === 'done') {
        this.counters.offsetScripts++;
        for (const { command, error } of reply.errors) {
          const c = call.commands[command]!;
          if (mapping.isReplay?.(error, c)) continue;
          this.blame(failed, call.owner[command]!, this.wrap(error, c));
        }
        return;
      }
      this.counters.offsetConflicts++;
      stored = reply.stored;
      if (round >= MAX_OFFSET_ROUNDS) {
        throw new StoreError(
          `The stored offsets in "${hash.key}" kept moving past this batch (${round} rounds); the batch is retried`,
          { details: { mapping: mapping.name, step: 'offsets', offsets: 'moving' } },
        );
      }
    }
  }

  /**
   * The offsets stored with this sink's data for a Kafka bridge's consumer group: the next offset
   * to read per partition (absent where nothing is stored). Used by the bridge on assignment.
   */
  async storedOffsets(
    group: string,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
  ): Promise<Array<{ topic: string; partition: number; offset: string }>> {
    const hash = this.offsets;
    if (hash === undefined)
      throw invalidOption('storeOffsets', 'set on the Redis sink whose stored offsets are read', undefined);
    if (group !== hash.group)
      throw invalidOption('groupId', `the group the sink stores offsets for ("${hash.group}")`, group);
    let stored: StoredOffsets;
    try {
      stored = await hash.read(this.o.client, partitions);
    } catch (error) {
      throw this.wrap(error, ['HMGET'], { step: 'read stored offsets' });
    }
    const out: Array<{ topic: string; partition: number; offset: string }> = [];
    for (const p of partitions) {
      const next = stored.get(partitionKey(p.topic, p.partition));
      if (next !== undefined) out.push({ topic: p.topic, partition: p.partition, offset: next.toString() });
    }
    return out;
  }

  /** Keeps the worst error of a record (fatal over split over retry). */
  private blame(failed: Map<number, StoreError>, index: number, error: StoreError): void {
    const before = failed.get(index);
    if (before === undefined || RANK[this.classify(error)] > RANK[this.classify(before)])
      failed.set(index, error);
  }

  /**
   * Command indexes grouped so that each group can go out as one pipeline: everything for a
   * standalone server; per node for a cluster pipeline; per slot for a cluster transaction.
   */
  private groups(commands: readonly RedisCommand[]): number[][] {
    const client = this.o.client as Cluster & { isCluster?: boolean; slots?: string[][] };
    if (client.isCluster !== true) return [commands.map((_, i) => i)];
    const byGroup = new Map<string, number[]>();
    for (let i = 0; i < commands.length; i++) {
      const key = commandKey(commands[i]!);
      const slot = key === undefined ? 0 : keySlot(key);
      const nodes = this.o.atomic ? undefined : client.slots?.[slot];
      const id = nodes && nodes.length > 0 ? nodes.join(';') : `slot:${slot}`;
      let g = byGroup.get(id);
      if (!g) byGroup.set(id, (g = []));
      g.push(i);
    }
    return [...byGroup.values()];
  }

  /** Sends one group; every command gets a reply pair, errors included. */
  private async send(commands: RedisCommand[], wholeBatch: boolean): Promise<Reply[]> {
    if (!this.o.atomic) {
      try {
        const replies = (await this.queue(this.o.client.pipeline(), commands).exec()) as Reply[] | null;
        if (replies) return replies;
        return commands.map(() => [new StoreError('Redis pipeline returned no replies'), null]);
      } catch (error) {
        // A cluster client can refuse a pipeline before sending it: nothing ran.
        return commands.map(() => [error as Error, null]);
      }
    }
    try {
      const replies = (await this.queue(this.o.client.multi(), commands).exec()) as Reply[] | null;
      // null: the transaction was discarded (a WATCHed key changed); nothing was applied.
      if (replies) return replies;
      return commands.map(() => [
        new StoreError('Redis transaction was discarded (EXEC returned null)', { driverCode: 'EXECNULL' }),
        null,
      ]);
    } catch (error) {
      if (redisErrorPrefix(error) === 'EXECABORT' && wholeBatch) {
        // Nothing was applied; let the engine bisect the batch to find the record(s) refused.
        throw this.wrap(error, ['EXEC']);
      }
      if (redisErrorPrefix(error) === 'EXECABORT') return this.isolate(commands);
      return commands.map(() => [error as Error, null]);
    }
  }

  /** A cluster slot's transaction was refused while queueing: find the bad commands one by one. */
  private async isolate(commands: RedisCommand[]): Promise<Reply[]> {
    const out: Reply[] = [];
    for (const c of commands) {
      try {
        const r = (await this.queue(this.o.client.multi(), [c]).exec()) as Reply[] | null;
        out.push(
          r?.[0] ?? [
            new StoreError('Redis transaction was discarded (EXEC returned null)', {
              driverCode: 'EXECNULL',
            }),
            null,
          ],
        );
      } catch (error) {
        out.push([error as Error, null]);
      }
    }
    return out;
  }

  /** Queues commands by name (`call`), so any command the server knows can be sent. */
  private queue(pipeline: ChainableCommander, commands: readonly RedisCommand[]): ChainableCommander {
    for (const c of commands)
      (pipeline.call as (...a: unknown[]) => unknown).apply(pipeline, c as unknown as unknown[]);
    return pipeline;
  }

  private wrap(
    error: unknown,
    command: readonly [string, ...unknown[]],
    extra: Record<string, unknown> = {},
  ): StoreError {
    if (error instanceof StoreError) return error;
    const unknown = isUnknownOutcome(error);
    const name = String(command[0]).toUpperCase();
    const driverCode =
      redisErrorPrefix(error) ??
      (error instanceof Error ? ((error as { code?: string }).code ?? error.name) : undefined);
    const what = unknown ? `outcome unknown for ${name}` : `${name} failed`;
    return new StoreError(`Redis ${what} (mapping "${this.o.mapping.name}"): ${safeMessage(error)}`, {
      cause: error,
      driverCode,
      details: {
        command: name,
        mapping: this.o.mapping.name,
        outcome: unknown ? 'unknown' : 'failed',
        ...extra,
      },
    });
  }

  classify(error: unknown): ErrorClass {
    if (error instanceof StoreError) {
      const { details } = error;
      if (details.stage === 'mapping') return 'split';
      if (details.offsets === 'moving') return 'retry';
      // A script whose records all carry offsets may run twice: the second run changes nothing.
      if (details.guarded === true && isUnknownOutcome(error)) return 'retry';
      // The offsets script itself failed (not a command it ran): no record is to blame.
      if (details.step === 'offsets' && SCRIPT_FAILURE.test(messageOf(error.cause))) return 'fatal';
    }
    const cls = classifyRedisError(error, {
      unknownOutcome: this.o.onUnknownOutcome === 'retry' ? 'retry' : 'split',
    });
    // A client the user ended will not come back: retrying would only wait out the budget.
    if (cls === 'retry' && this.o.client.status === 'end' && redisErrorPrefix(error) === undefined)
      return 'fatal';
    return cls;
  }

  async close(): Promise<void> {
    if (!this.o.closeClient) return;
    try {
      await this.o.client.quit();
    } catch {
      this.o.client.disconnect();
    }
  }
}

/** Creates the Redis adapter; pass it to `new Sink(adapter, options)`. */
export function redisAdapter<T>(options: RedisAdapterOptions<T>): RedisAdapter<T> {
  return new RedisAdapter(options);
}
