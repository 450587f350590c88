import type { OpenedStore, StoreSpec } from './stores.js';

/** The Kafka producer store (filled in once the producer adapter is exported). */
export async function openKafka(_spec: StoreSpec, _cellId: string): Promise<OpenedStore> {
  throw new TypeError('the Kafka producer adapter is not exported by @spillway/kafka yet');
}
