import type { SeededRandom } from './random.js';

/** A Tandem Bikes dock status event: what every benchmark writes. */
export interface DockStatus {
  seq: number;
  dockId: number;
  stationId: string;
  bikesAvailable: number;
  docksFree: number;
  status: 'in_service' | 'full' | 'offline';
  reportedAt: number;
}

const STATUSES: readonly DockStatus['status'][] = [
  'in_service',
  'in_service',
  'in_service',
  'full',
  'offline',
];

/** Builds the `seq`-th event of partition `partition` (a partition is a district of stations). */
export function dockStatus(
  rnd: SeededRandom,
  seq: number,
  partition: number,
  reportedAt: number,
): DockStatus {
  const bikes = rnd.int(20);
  return {
    seq,
    dockId: partition * 10_000 + rnd.int(10_000),
    stationId: `district-${partition}-st-${rnd.int(50)}`,
    bikesAvailable: bikes,
    docksFree: 20 - bikes,
    status: STATUSES[rnd.int(STATUSES.length)] ?? 'in_service',
    reportedAt,
  };
}
