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
  private values: RowValue[] | undefined;
  /** Parameters written into `values`. */
  private at = 0;
  private rows = 0;
  /** Rows added so far, over every statement. */
  total = 0;

  constructor(
    private readonly width: number,
    /** Rows per statement, the 65,535-parameter bound already applied. */
    private readonly perStatement: number,
    /**
     * Rows the batch may add at most. Each statement's array is made at its final size: grown by
     * `push`, an array of tens of thousands of parameters is copied a dozen times on the way, and
     * the large copies are garbage of the old generation.
     */
    private expected: number,
  ) {}

  /**
   * One row of mapped values (`width` of them), converted to wire values. A value with no SQL
   * meaning throws, and the row leaves nothing behind.
   */
  add(mapped: readonly unknown[]): void {
    this.values ??= this.fresh();
    const values = this.values;
    const width = this.width;
    let k = this.at;
    // More rows than expected (never, when `expected` is the batch's length): room for one more.
    if (k + width > values.length) values.length = k + width;
    for (let c = 0; c < width; c++) values[k++] = toRowValue(mapped[c]);
    this.at = k;
    this.total++;
    this.expected--;
    if (++this.rows === this.perStatement) this.cut(this.values);
  }

  /** The statements, in row order. */
  statements(): Tuples[] {
    if (this.values !== undefined && this.rows > 0) this.cut(this.values);
    return this.done;
  }

  private fresh(): RowValue[] {
    return new Array<RowValue>(Math.min(this.perStatement, Math.max(this.expected, 1)) * this.width);
  }

  private cut(values: RowValue[]): void {
    // Rows refused on the way leave the array longer than what was written.
    if (this.at < values.length) values.length = this.at;
    this.done.push({ rows: this.rows, values });
    this.values = undefined;
    this.at = 0;
    this.rows = 0;
  }
}
