// Measures the three-node test cluster against the single test broker in the same run:
// `npx tsx test/harness/measure-cluster.ts [starts]` (default 3). For each start: the single
// broker's time to ready, the cluster's time to ready (storage formatting included), each node's
// resident memory, the time until a killed partition leader is replaced, and the time for the
// killed node to restart and catch up. Prints every sample, then medians and ranges.

import { startKafka } from './kafka.js';
import { startKafkaCluster } from './kafka-cluster.js';

const starts = Number(process.argv[2] ?? 3);
const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)] ?? Number.NaN;
const summary = (xs: number[], unit: string) =>
  `median ${median(xs)} ${unit} (min ${Math.min(...xs)}, max ${Math.max(...xs)}; ${xs.join(' / ')})`;

const singleMs: number[] = [];
const clusterMs: number[] = [];
const residentMib: number[] = [];
const failoverMs: number[] = [];
const rejoinMs: number[] = [];
for (let i = 0; i < starts; i++) {
  let t = Date.now();
  const broker = await startKafka({ label: 'measure' });
  singleMs.push(Date.now() - t);
  await broker.stop();

  t = Date.now();
  const cluster = await startKafkaCluster({ label: 'measure' });
  try {
    clusterMs.push(Date.now() - t);
    for (const node of cluster.nodes) residentMib.push(Math.round((node.residentBytes() ?? 0) / 2 ** 20));
    const topic = await cluster.createTopic(`measure_${i}`, 3);
    t = Date.now();
    const victim = await cluster.killLeaderOf(topic, 0);
    await cluster.waitForNewLeader(topic, 0, victim);
    failoverMs.push(Date.now() - t);
    t = Date.now();
    await victim.restart();
    await cluster.waitForFullIsr([topic]);
    rejoinMs.push(Date.now() - t);
  } finally {
    await cluster.stop();
  }
}
console.log(`single broker ready:        ${summary(singleMs, 'ms')}`);
console.log(`cluster ready:              ${summary(clusterMs, 'ms')}`);
console.log(`cluster / single (medians): ${(median(clusterMs) / median(singleMs)).toFixed(2)}`);
console.log(`resident memory per node:   ${summary(residentMib, 'MiB')}`);
console.log(`leader replaced after kill: ${summary(failoverMs, 'ms')}`);
console.log(`restart until full ISR:     ${summary(rejoinMs, 'ms')}`);
