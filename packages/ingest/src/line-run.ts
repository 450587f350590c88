/**
 * Gathers rows that go as their lines into runs (`asCsvRun`): a row joins the run when its bytes
 * follow the run's in the same input chunk after a bare LF or a CRLF, so the run is one slice of
 * the input. The CR of each CRLF between two rows is taken out when the run is taken (COPY takes
 * one kind of line break per statement; the CR of a CRLF inside quotes is data and stays).
 */
import { withoutCrs } from './csv-framer.js';

const LF = 0x0a;
const CR = 0x0d;

export interface GatheredRun {
  /** The rows' bytes, LF between them. */
  readonly bytes: Buffer;
  /** Physical line of the first row. */
  readonly line: number;
  readonly rows: number;
}

export class LineRun {
  /** The input from the first row on: the run is `area[0, end)`, less the bytes at `crs`. */
  private area: Buffer | undefined;
  private end = 0;
  private readonly crs: number[] = [];
  private line = 0;
  private rows = 0;

  /** Adds the row when its bytes follow the run's; false when they do not (or there is no run). */
  join(bytes: Buffer): boolean {
    const area = this.area;
    if (area === undefined || bytes.buffer !== area.buffer) return false;
    const gap = bytes.byteOffset - area.byteOffset - this.end;
    if (gap === 1 && area[this.end] === LF) {
      this.end += 1 + bytes.length;
      this.rows++;
      return true;
    }
    if (gap === 2 && area[this.end] === CR && area[this.end + 1] === LF) {
      this.crs.push(this.end);
      this.end += 2 + bytes.length;
      this.rows++;
      return true;
    }
    return false;
  }

  /** Starts a run with this row (the run before must have been taken). */
  start(bytes: Buffer, line: number): void {
    this.area = Buffer.from(bytes.buffer, bytes.byteOffset, bytes.buffer.byteLength - bytes.byteOffset);
    this.end = bytes.length;
    this.line = line;
    this.rows = 1;
  }

  /** The run gathered so far, which then starts again empty; undefined when there is none. */
  take(): GatheredRun | undefined {
    const area = this.area;
    if (area === undefined) return undefined;
    const bytes =
      this.crs.length === 0 ? area.subarray(0, this.end) : withoutCrs(area, 0, this.end, this.crs);
    this.area = undefined;
    this.crs.length = 0;
    return { bytes, line: this.line, rows: this.rows };
  }
}
