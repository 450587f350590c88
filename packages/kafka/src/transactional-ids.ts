/**
 * Transactional ids: one per source partition, `<prefix>-<group>-<topic>-<partition>`. The id is
 * what fences: whoever owns a partition next opens a producer with the same id, and the broker
 * then refuses the former owner's transactions (a new producer epoch). Two sinks in one process
 * that would share ids are refused when the second is made.
 */
import { invalidOption } from '@spillway/core/kit';

/** The transactional id of one source partition. */
export function transactionalIdOf(prefix: string, group: string, topic: string, partition: number): string {
  return `${prefix}-${group}-${topic}-${partition}`;
}

/** `prefix` + `group` pairs of the open transactional sinks of this process. */
const inUse = new Set<string>();

/**
 * Reserves `prefix` for `group` in this process until the returned release is called. Throws a
 * TypeError naming `transactionalIdPrefix` when another open sink holds it.
 */
export function reserveIds(prefix: string, group: string): () => void {
  const key = JSON.stringify([prefix, group]);
  if (inUse.has(key))
    throw invalidOption(
      'transactionalIdPrefix',
      `a prefix no other open transactional sink of group "${group}" uses (the two would fence each other)`,
      prefix,
    );
  inUse.add(key);
  let released = false;
  return () => {
    if (released) return;
    released = true;
    inUse.delete(key);
  };
}
