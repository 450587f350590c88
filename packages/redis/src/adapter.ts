/**
 * The Redis sink adapter: a batch goes out as one pipeline (or one MULTI/EXEC), and every reply
 * is checked and attributed to the record whose command it answers.
 */
import {
  type Batch,
  type ErrorClass,
  messageOf,
  type PartialWrite,
  type SinkAdapter,
  StoreError,
} from '@spillway/core';
import type { ChainableCommander, Cluster } from 'ioredis';
import { classifyRedisError, isUnknownOutcome, redisErrorPrefix } from './classify.js';
import { commandList, type RedisCommand, type RedisMapping } from './commands.js';
import { type RedisAdapterOptions, type ResolvedRedisOptions, resolveRedisOptions } from './options.js';
import { keySlot } from './slot.js';

type Reply = [error: Error | null, result: unknown];

/** Severity when one record's commands fail differently: the worst reading wins. */
const RANK: Record<ErrorClass, number> = { retry: 0, split: 1, fatal: 2 };

/** Where a command's key is: after the script and key count for scripts, else the first argument. */
function commandKey(command: RedisCommand): RedisCommand[1] | undefined {
  const name = command[0].toUpperCase();
  if (
    name === 'EVAL' ||
    name === 'EVALSHA' ||
    name === 'FCALL' ||
    name === 'EVAL_RO' ||
    name === 'EVALSHA_RO' ||
    name === 'FCALL_RO'
  ) {
    return Number(command[2]) > 0 ? command[3] : undefined;
  }
  return command[1];
}

/** A server message without the arguments Redis may echo (they can hold record data). */
function safeMessage(error: unknown): string {
  return messageOf(error).replace(/, with args beginning with:.*$/s, '');
}

export class RedisAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'redis';
  private readonly o: ResolvedRedisOptions<T>;

  constructor(options: RedisAdapterOptions<T>) {
    this.o = resolveRedisOptions(options);
  }

  get mapping(): RedisMapping<T> {
    return this.o.mapping;
  }

  // biome-ignore lint/suspicious/noConfusingVoidType: matches SinkAdapter.write
  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    const { mapping } = this.o;
    const commands: RedisCommand[] = [];
    const owner: number[] = [];
    // Record index → its worst error so far.
    const failed = new Map<number, StoreError>();
    for (let i = 0; i < batch.records.length; i++) {
      let list: readonly RedisCommand[];
      try {
        list = commandList(mapping, batch.records[i] as T, batch.metas[i]);
        if (list.length === 0) continue;
      } catch (error) {
        failed.set(
          i,
          new StoreError(`Mapping "${mapping.name}" failed for a record: ${messageOf(error)}`, {
            cause: error,
            details: { mapping: mapping.name, stage: 'mapping' },
          }),
        );
        continue;
      }
      for (const c of list) {
        commands.push(c);
        owner.push(i);
      }
    }

    if (commands.length > 0) {
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
    if (failed.size === 0) return undefined;
    return { rejected: [...failed].map(([index, error]) => ({ index, error })) };
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

  private wrap(error: unknown, command: readonly [string, ...unknown[]]): StoreError {
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
      details: { command: name, mapping: this.o.mapping.name, outcome: unknown ? 'unknown' : 'failed' },
    });
  }

  classify(error: unknown): ErrorClass {
    if (error instanceof StoreError && error.details.stage === 'mapping') return 'split';
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
