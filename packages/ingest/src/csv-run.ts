/**
 * Runs of valid CSV rows handed on as one record. Consecutive rows that each could go as their
 * own text (`CsvLine`), and whose bytes lie next to each other in the input separated by a bare LF,
 * go to the sink as one `CsvRun`: their bytes are already COPY (FORMAT csv) input, several lines
 * of it. The sink then does its per-record work (admission, batching, settlement) once per run.
 *
 * A store that refuses a run refuses it whole: one bad row fails the COPY of all. The run is then
 * isolated (`isolate()`): its rows go back to the ingest that read them, which writes them again
 * one row per record, so the sink's own isolation finds the bad row and the others land.
 */
import { CsvFramer } from './csv-framer.js';
import { CsvLine, type LineLayout } from './csv-line.js';

/** The ingest that made a run: takes its rows back to write them one by one. */
export interface RunOwner {
  /** False when that ingest has ended and can no longer write them. */
  resubmit(run: CsvRun): boolean;
}

/** One row of a run, with the physical line it starts on. */
export interface RunLine {
  readonly line: number;
  readonly csv: CsvLine;
}

/**
 * Valid CSV rows as the bytes of consecutive COPY (FORMAT csv) lines: the rows' records in file
 * order separated by LF, without a line break after the last, each as a `CsvLine` would hold it.
 */
export class CsvRun {
  constructor(
    readonly bytes: Buffer,
    /** Physical line (1-based) where the first row starts. */
    readonly firstLine: number,
    /** Rows in the run. */
    readonly count: number,
    private readonly layout: LineLayout,
    private readonly owner: RunOwner,
  ) {}

  /** The rows, each with its physical line (found again by framing the bytes). */
  lines(): RunLine[] {
    // Every record here passed the framer once: framing them again finds the same records.
    const framer = new CsvFramer(0x2c, this.bytes.length, this.firstLine, false);
    const frames = [...framer.push(this.bytes), ...framer.end()];
    return frames.map((f) => ({ line: f.line, csv: new CsvLine(f.bytes, this.layout) }));
  }

  /**
   * Hands the rows back to the ingest that read them, to be written one row per record (a store
   * refused the run as a whole). False when that ingest has ended: the caller keeps the rows.
   */
  isolate(): boolean {
    return this.owner.resubmit(this);
  }
}
