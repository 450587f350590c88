/**
 * The parameters of a batch's INSERT statements, built when the batch is written: each row's
 * values go straight into the flat, row-major array of its statement, so that no row array waits
 * in the buffer per record and none is made per row on the way out.
 */
import { type RowValue, toRowValue } from './values.js';

/** One INSERT statement's rows: `values` holds `rows` × width parameters, row-major. */
export interface Tuples {
  readonly rows: number;
  readonly values: readonly RowValue[];
}

export class StatementParameters {
  private readonly done: Tuples[] = [];
  private values: RowValue[] = [];
  private rows = 0;
  /** Rows added so far, over every statement. */
  total = 0;

  constructor(
    private readonly width: number,
    /** Rows per statement, the 65,535-parameter bound already applied. */
    private readonly perStatement: number,
  ) {}

  /**
   * One row of mapped values (`width` of them), converted to wire values. A value with no SQL
   * meaning throws, and the row leaves nothing behind.
   */
  add(mapped: readonly unknown[]): void {
    const values = this.values;
    const start = values.length;
    try {
      for (let c = 0; c < this.width; c++) values.push(toRowValue(mapped[c]));
    } catch (error) {
      values.length = start;
      throw error;
    }
    this.total++;
    if (++this.rows === this.perStatement) this.cut();
  }

  /** The statements, in row order. */
  statements(): Tuples[] {
    if (this.rows > 0) this.cut();
    return this.done;
  }

  private cut(): void {
    this.done.push({ rows: this.rows, values: this.values });
    this.values = [];
    this.rows = 0;
  }
}
