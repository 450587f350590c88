/**
 * Why a row was rejected. Stable strings: they appear in reject files and summaries.
 * - `csv-syntax`: a quote where RFC 4180 allows none, text after a closing quote, a quote never closed.
 * - `column-count`: a CSV record with more or fewer fields than the header.
 * - `too-long`: a line (NDJSON) or record (CSV) longer than the limit; only its first bytes are kept.
 * - `utf8`: bytes that are not valid UTF-8.
 * - `json`: an NDJSON line that is not valid JSON.
 * - `not-object`: an NDJSON line whose value is not a JSON object.
 * - `blank`: a blank line, when `blankLines` is `'reject'`.
 * - `required`: a required column is missing or empty.
 * - `type`: a value does not parse as its column's type.
 * - `pattern`, `range`, `enum`: a value fails its column's pattern, min/max or allowed values.
 * - `schema`: the Standard Schema validator reported an issue.
 * - `map`: the `map` function threw for this row.
 * - `store`: the store refused the row (a constraint, a type the server rejects).
 */
export type RejectReason =
  | 'csv-syntax'
  | 'column-count'
  | 'too-long'
  | 'utf8'
  | 'json'
  | 'not-object'
  | 'blank'
  | 'required'
  | 'type'
  | 'pattern'
  | 'range'
  | 'enum'
  | 'schema'
  | 'map'
  | 'store';

/** One rejected row, as handed to a reject target. */
export interface Reject {
  /** Physical line (1-based) where the record starts. */
  readonly line: number;
  /** The column at fault, when one is. */
  readonly column: string | undefined;
  readonly reason: RejectReason;
  /** What is wrong, without the row's contents. */
  readonly message: string;
  /** The record's bytes as they came, without the line break (only the first bytes for `too-long`). */
  readonly raw: Uint8Array;
  /** True when `raw` is only the first part of the record. */
  readonly truncated: boolean;
}

/** Where rejected rows go. `write` is awaited: a slow target slows the ingest, never drops. */
export interface RejectTarget {
  write(reject: Reject): void | Promise<void>;
  close?(): Promise<void>;
}
