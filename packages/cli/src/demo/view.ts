/**
 * What the demo shows while it runs: a compact view redrawn in place on a terminal, or one plain
 * line every few seconds when the output is not a terminal (CI logs, pipes).
 */
import type { FlushReason, SinkSnapshot } from '@spillway/core';
import { createLogUpdate } from 'log-update';

export interface SinkView {
  readonly name: string;
  readonly snapshot: SinkSnapshot;
  /** A figure read from the store itself (rows in the table, messages on the topic). */
  readonly live: string | undefined;
}

export interface ViewState {
  readonly elapsedMs: number;
  readonly durationMs: number;
  readonly phase: string;
  readonly eventsPerSecond: number;
  readonly produced: number;
  /** Events the silent district's uplink holds. */
  readonly held: number;
  readonly sinks: readonly SinkView[];
  /** Set once shutdown started. */
  readonly stopping: boolean;
}

export interface DemoView {
  update(state: ViewState): void;
  /** Prints a line above the view. */
  log(line: string): void;
  /** Leaves the last frame on screen and stops redrawing. */
  stop(): void;
}

export const fmt = (n: number): string => Math.round(n).toLocaleString('en-US');

export function ms(value: number): string {
  if (value >= 1000) return `${(value / 1000).toFixed(1)} s`;
  return `${Math.round(value)} ms`;
}

export function clock(msValue: number): string {
  const s = Math.max(0, Math.floor(msValue / 1000));
  return `${String(Math.floor(s / 60)).padStart(2, '0')}:${String(s % 60).padStart(2, '0')}`;
}

const SHOWN_REASONS: readonly FlushReason[] = ['size', 'age', 'idle', 'shutdown'];
const RARE_REASONS: readonly FlushReason[] = ['bytes', 'manual', 'revoke'];

/** Flush reasons worth a column: the usual four, and any other that happened. */
function reasonsToShow(sinks: readonly SinkView[]): FlushReason[] {
  const extra = RARE_REASONS.filter((r) => sinks.some((s) => s.snapshot.flushes[r] > 0));
  return [...SHOWN_REASONS, ...extra];
}

const pad = (s: string, n: number) => s.padStart(n);
const padEnd = (s: string, n: number) => s.padEnd(n);

/** The live frame: a few lines, at most ~78 columns wide. */
export function renderFrame(state: ViewState): string {
  const lines: string[] = [];
  const title = 'Tandem Bikes · spillway demo';
  const time = `${clock(state.elapsedMs)} / ${clock(state.durationMs)}`;
  lines.push(`${title}${' '.repeat(Math.max(2, 76 - title.length - time.length))}${time}`);
  const phase = state.stopping
    ? 'stopping: flushing every sink'
    : `${state.phase} · ${fmt(state.eventsPerSecond)} events/s`;
  const held = state.held > 0 ? ` · uplink holding ${fmt(state.held)}` : '';
  lines.push(`${phase}${held}`);
  lines.push(`produced ${fmt(state.produced)} dock events`);
  lines.push('');
  lines.push(
    `${padEnd('sink', 9)}${pad('buffered', 9)}${pad('oldest', 9)}${pad('in flight', 10)}${pad('written', 10)}${pad('p99 accept→durable', 20)}`,
  );
  for (const s of state.sinks) {
    const snap = s.snapshot;
    lines.push(
      `${padEnd(s.name, 9)}${pad(fmt(snap.bufferedRecords), 9)}${pad(ms(snap.oldestAgeMs), 9)}${pad(fmt(snap.inFlightRecords), 10)}${pad(fmt(snap.written), 10)}${pad(snap.acceptToDurableMs.count === 0 ? '–' : ms(snap.acceptToDurableMs.p99), 20)}`,
    );
  }
  lines.push('');
  const reasons = reasonsToShow(state.sinks);
  lines.push(`${padEnd('flushes', 9)}${reasons.map((r) => pad(r, 9)).join('')}`);
  for (const s of state.sinks) {
    lines.push(`${padEnd(s.name, 9)}${reasons.map((r) => pad(fmt(s.snapshot.flushes[r]), 9)).join('')}`);
  }
  const live = state.sinks.filter((s) => s.live !== undefined);
  if (live.length > 0) {
    lines.push('');
    lines.push(`in the stores: ${live.map((s) => `${s.name} ${s.live}`).join(' · ')}`);
  }
  lines.push('');
  lines.push(
    state.stopping
      ? 'shutting down: sources → sinks → summary → clients'
      : 'Ctrl-C stops cleanly (sources stop, sinks flush, then the summary)',
  );
  return lines.join('\n');
}

/** One plain line: the same figures, for logs. */
export function renderLine(state: ViewState): string {
  const sinks = state.sinks.map((s) => {
    const snap = s.snapshot;
    const flushes = reasonsToShow([s])
      .map((r) => `${r} ${snap.flushes[r]}`)
      .join(' ');
    const p99 = snap.acceptToDurableMs.count === 0 ? '–' : ms(snap.acceptToDurableMs.p99);
    const live = s.live === undefined ? '' : `, ${s.live}`;
    return `${s.name}: buffered ${snap.bufferedRecords}, oldest ${ms(snap.oldestAgeMs)}, flushes ${flushes}, p99 ${p99}${live}`;
  });
  const phase = state.stopping ? 'stopping' : `${state.phase} (${fmt(state.eventsPerSecond)}/s)`;
  return `[${clock(state.elapsedMs)}] ${phase} | produced ${state.produced} | ${sinks.join(' | ')}`;
}

/** Redraws the frame in place (log-update). */
export function liveView(stream: NodeJS.WriteStream): DemoView {
  const draw = createLogUpdate(stream, { showCursor: false });
  let last: ViewState | undefined;
  return {
    update(state) {
      last = state;
      draw(renderFrame(state));
    },
    log(line) {
      draw.clear();
      stream.write(`${line}\n`);
      if (last) draw(renderFrame(last));
    },
    stop() {
      if (last) draw(renderFrame(last));
      draw.done();
    },
  };
}

/** Prints a line every `everyMs` (and the last state on stop). */
export function plainView(write: (line: string) => void, everyMs: number): DemoView {
  let lastPrinted = Number.NEGATIVE_INFINITY;
  let last: ViewState | undefined;
  let lastLine = '';
  return {
    update(state) {
      last = state;
      if (state.elapsedMs - lastPrinted >= everyMs) {
        lastPrinted = state.elapsedMs;
        lastLine = renderLine(state);
        write(lastLine);
      }
    },
    log(line) {
      write(line);
    },
    stop() {
      if (last) {
        const line = renderLine(last);
        if (line !== lastLine) write(line);
      }
    },
  };
}
