/**
 * The Tandem Bikes day, compressed into a demo run: docks in six districts emit status events — a
 * night trickle, a morning rush-hour burst, then one district's uplink fails and it goes silent
 * while the others carry on, and finally the uplink comes back and replays what it held. Pure and
 * seeded: the same seed and duration give the same events.
 */

/** One status event from one dock. */
export interface DockEvent {
  /** Unique over the run, in emission order. */
  readonly eventId: number;
  readonly dockId: string;
  readonly district: string;
  /** Per-district sequence number: the offset of the district's uplink stream. */
  readonly seq: number;
  readonly bikes: number;
  readonly emptySlots: number;
  readonly status: 'in_service' | 'empty' | 'full' | 'fault';
  /** When the dock saw it, ms since the epoch. */
  readonly at: number;
}

export interface Phase {
  readonly name: string;
  /** Share of the run, 0..1; the shares add up to 1. */
  readonly share: number;
  /** Events per second over all districts that are up, at rate multiplier 1. */
  readonly eventsPerSecond: number;
  /** A district whose uplink is down during the phase: its events are held, not sent. */
  readonly silentDistrict?: string;
  /** The held events of this district are sent at the start of the phase. */
  readonly replayDistrict?: string;
}

export const DISTRICTS = ['Old Town', 'Harbour', 'University', 'Riverside', 'Market', 'Hillcrest'] as const;
export const DOCKS_PER_DISTRICT = 24;
export const DOCK_CAPACITY = 20;

const SILENT = 'Harbour';

/** The day's shape. Rates are at multiplier 1; the rush hour is ~150 times the night. */
export const PHASES: readonly Phase[] = [
  { name: 'night trickle', share: 0.25, eventsPerSecond: 15 },
  { name: 'morning rush hour', share: 0.3, eventsPerSecond: 2400 },
  { name: `${SILENT} uplink down`, share: 0.25, eventsPerSecond: 400, silentDistrict: SILENT },
  { name: `${SILENT} back, replaying`, share: 0.2, eventsPerSecond: 250, replayDistrict: SILENT },
];

/** mulberry32: a small seeded generator (common practice for reproducible demo data). */
export function seededRandom(seed: number): () => number {
  let state = seed >>> 0;
  return () => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

interface Dock {
  readonly id: string;
  readonly district: string;
  bikes: number;
  faulty: boolean;
}

function dockCode(district: string): string {
  return district.slice(0, 2).toUpperCase();
}

export interface ScenarioOptions {
  /** Length of the run, ms. */
  durationMs: number;
  /** Multiplies every phase's rate. */
  rate: number;
  seed: number;
}

/**
 * Produces the events due up to a point in the run. The caller asks `due(elapsedMs)` on each
 * tick and writes what comes back; arrivals inside a tick are spread at the phase's rate.
 */
export class Scenario {
  readonly docks: readonly Dock[];
  private readonly random: () => number;
  private readonly seqs = new Map<string, number>();
  private readonly held: DockEvent[] = [];
  private nextEventId = 1;
  private lastMs = 0;
  private nextArrivalMs = 0;
  private replayed = new Set<number>();

  constructor(private readonly options: ScenarioOptions) {
    this.random = seededRandom(options.seed);
    const docks: Dock[] = [];
    for (const district of DISTRICTS) {
      const code = dockCode(district);
      for (let i = 1; i <= DOCKS_PER_DISTRICT; i++) {
        docks.push({
          id: `${code}-${String(i).padStart(3, '0')}`,
          district,
          bikes: Math.floor(this.random() * (DOCK_CAPACITY + 1)),
          faulty: false,
        });
      }
    }
    this.docks = docks;
    this.nextArrivalMs = this.gapAfter(0);
  }

  /** The phase at a point of the run, and its index. */
  phaseAt(elapsedMs: number): { phase: Phase; index: number } {
    const f = Math.min(1, Math.max(0, elapsedMs / this.options.durationMs));
    let end = 0;
    for (let i = 0; i < PHASES.length; i++) {
      const phase = PHASES[i] as Phase;
      end += phase.share;
      if (f < end || i === PHASES.length - 1) return { phase, index: i };
    }
    return { phase: PHASES[0] as Phase, index: 0 };
  }

  /** Events per second now, with the rate multiplier applied. */
  rateAt(elapsedMs: number): number {
    return this.phaseAt(elapsedMs).phase.eventsPerSecond * this.options.rate;
  }

  /** Events the district uplinks are holding (their district is silent). */
  get heldCount(): number {
    return this.held.length;
  }

  /** The events to send for the time between the previous call and `elapsedMs`. */
  due(elapsedMs: number, wallNow: number): DockEvent[] {
    const from = this.lastMs;
    const to = Math.min(elapsedMs, this.options.durationMs);
    if (to <= from) return [];
    this.lastMs = to;
    const out: DockEvent[] = [];
    const { phase, index } = this.phaseAt(from);
    if (phase.replayDistrict && !this.replayed.has(index)) {
      // The uplink is back: it sends what it held, with the times the docks saw the events.
      this.replayed.add(index);
      for (const e of this.held.splice(0)) out.push({ ...e, eventId: this.nextEventId++ });
    }
    // Arrivals form a Poisson process at the phase's rate: exponential gaps, so quiet spells and
    // clumps happen as they do on a real uplink.
    while (this.nextArrivalMs <= to) {
      const at = this.nextArrivalMs;
      const current = this.phaseAt(at).phase;
      const dock = this.pickDock();
      const event = this.step(dock, Math.round(wallNow - (to - at)));
      if (current.silentDistrict === dock.district) this.held.push(event);
      else out.push({ ...event, eventId: this.nextEventId++ });
      this.nextArrivalMs += this.gapAfter(at);
    }
    return out;
  }

  /** Exponential gap (inverse-CDF sampling) at the rate in force at `atMs`. */
  private gapAfter(atMs: number): number {
    const rate = this.rateAt(atMs);
    return (-1000 / rate) * Math.log(1 - this.random());
  }

  private pickDock(): Dock {
    return this.docks[Math.floor(this.random() * this.docks.length)] as Dock;
  }

  /** A ride starts or ends at the dock; now and then a dock reports a fault or recovers. */
  private step(dock: Dock, at: number): DockEvent {
    const r = this.random();
    if (r < 0.002) dock.faulty = !dock.faulty;
    else if (r < 0.5) dock.bikes = Math.max(0, dock.bikes - 1);
    else dock.bikes = Math.min(DOCK_CAPACITY, dock.bikes + 1);
    const seq = (this.seqs.get(dock.district) ?? 0) + 1;
    this.seqs.set(dock.district, seq);
    const status = dock.faulty
      ? 'fault'
      : dock.bikes === 0
        ? 'empty'
        : dock.bikes === DOCK_CAPACITY
          ? 'full'
          : 'in_service';
    return {
      eventId: 0,
      dockId: dock.id,
      district: dock.district,
      seq,
      bikes: dock.bikes,
      emptySlots: DOCK_CAPACITY - dock.bikes,
      status,
      at,
    };
  }
}
