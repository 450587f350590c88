/**
 * What the offsets script (`storeOffsets`) cannot carry, checked before it is sent: commands that
 * run a script of their own, commands with more arguments than Lua passes on, and on a cluster,
 * keys outside the slot of the offsets hash.
 */
import { StoreError } from '@spillway/core';
import type { RedisArg, RedisCommand } from './commands.js';
import type { ScriptCall } from './offsets.js';
import { keySlot } from './slot.js';

/** Commands that run a script, which a script cannot call. */
const SCRIPT_COMMANDS: ReadonlySet<string> = new Set([
  'EVAL',
  'EVALSHA',
  'EVAL_RO',
  'EVALSHA_RO',
  'FCALL',
  'FCALL_RO',
]);

/** Arguments one command may have inside the offsets script (Lua's `unpack` stops near 8,000). */
const MAX_SCRIPT_COMMAND_ARGS = 7000;

/** Where a command's key is: after the script and key count for scripts, else the first argument. */
export function commandKey(command: RedisCommand): RedisCommand[1] | undefined {
  if (SCRIPT_COMMANDS.has(command[0].toUpperCase())) return Number(command[2]) > 0 ? command[3] : undefined;
  return command[1];
}

/**
 * Records whose commands cannot run inside the offsets script are refused before it is sent:
 * a script command (Redis does not let a script call another) stops the sink; a command with
 * more arguments than Lua can pass on fails its record alone (its list is cleared).
 */
export function refuseInScript(
  mappingName: string,
  lists: Array<readonly RedisCommand[] | undefined>,
  failed: Map<number, StoreError>,
): void {
  for (let i = 0; i < lists.length; i++) {
    const list = lists[i];
    if (list === undefined) continue;
    for (const c of list) {
      const name = String(c[0]).toUpperCase();
      if (SCRIPT_COMMANDS.has(name)) {
        throw new StoreError(
          `Mapping "${mappingName}" sends ${name}, which cannot run inside the script that stores offsets (\`storeOffsets\`); use a mapping without a script of its own`,
          { details: { command: name, mapping: mappingName, step: 'offsets' } },
        );
      }
      if (c.length > MAX_SCRIPT_COMMAND_ARGS) {
        failed.set(
          i,
          new StoreError(
            `Mapping "${mappingName}" made a ${name} with ${c.length} arguments; with \`storeOffsets\` a command may have at most ${MAX_SCRIPT_COMMAND_ARGS}`,
            { details: { mapping: mappingName, stage: 'mapping', command: name } },
          ),
        );
        lists[i] = undefined;
        break;
      }
    }
  }
}

/**
 * The data keys to declare with the script. None on a standalone server. On a cluster the
 * script runs on the node of the offsets hash, so every key must be in its slot: a batch split
 * across nodes cannot be atomic, and is refused (fatal) rather than stored half.
 */
export function scriptKeys(
  client: { isCluster?: boolean },
  hashKey: string,
  mappingName: string,
  call: ScriptCall,
): RedisArg[] {
  if (client.isCluster !== true) return [];
  const slot = keySlot(hashKey);
  const keys: RedisArg[] = [];
  for (const c of call.commands) {
    const key = commandKey(c);
    if (key === undefined) continue;
    const s = keySlot(key);
    if (s !== slot) {
      throw new StoreError(
        `storeOffsets with a Redis Cluster needs every key of a batch in the slot of the offsets hash "${hashKey}" (slot ${slot}); a ${String(c[0]).toUpperCase()} of mapping "${mappingName}" has its key in slot ${s}. A batch split across cluster nodes cannot be atomic: put the sink's keys and \`storeOffsets.key\` under one {hash tag}`,
        {
          driverCode: 'CROSSSLOT',
          details: { mapping: mappingName, step: 'offsets', slot: s, offsetsSlot: slot },
        },
      );
    }
    keys.push(key);
  }
  return keys;
}
