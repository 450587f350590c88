import type { IngestProgress } from '@spillway/ingest';
import cliProgress from 'cli-progress';

export type ProgressMode = 'auto' | 'bar' | 'lines' | 'none';

/** Shows ingest progress: a bar with rows/s and ETA on a terminal, plain periodic lines otherwise. */
export interface ProgressView {
  update(p: IngestProgress): void;
  stop(): void;
}

const mib = (b: number) => `${(b / 1024 / 1024).toFixed(1)} MiB`;

export function progressView(mode: ProgressMode, totalBytes: number | undefined): ProgressView {
  const resolved =
    mode === 'auto'
      ? process.stdout.isTTY && totalBytes !== undefined
        ? 'bar'
        : process.stdout.isTTY
          ? 'lines'
          : 'lines'
      : mode;
  if (resolved === 'none') return { update() {}, stop() {} };
  if (resolved === 'bar' && totalBytes !== undefined) {
    const bar = new cliProgress.SingleBar(
      {
        format:
          ' {bar} {percentage}% | {rows} rows | {rate} rows/s | {rejected} rejected | ETA {eta_formatted}',
        hideCursor: true,
        etaBuffer: 50,
        fps: 5,
        stream: process.stdout,
        barsize: 30,
      },
      cliProgress.Presets.shades_classic,
    );
    bar.start(Math.max(1, totalBytes), 0, { rows: 0, rate: 0, rejected: 0 });
    return {
      update(p) {
        bar.update(p.bytesRead, {
          rows: p.rowsRead,
          rate: Math.round(p.rowsRead / Math.max(p.elapsedMs / 1000, 0.001)),
          rejected: p.rowsRejected,
        });
      },
      stop() {
        bar.stop();
      },
    };
  }
  // Not a terminal (a log, a CI job): one line per update, to stderr so stdout keeps the summary.
  return {
    update(p) {
      const rate = Math.round(p.rowsRead / Math.max(p.elapsedMs / 1000, 0.001));
      const pct = p.totalBytes ? ` (${((100 * p.bytesRead) / p.totalBytes).toFixed(1)}%)` : '';
      process.stderr.write(
        `progress: ${p.rowsRead} rows read, ${p.rowsWritten} written, ${p.rowsRejected} rejected, ${mib(p.bytesRead)}${pct}, ${rate} rows/s\n`,
      );
    },
    stop() {},
  };
}
