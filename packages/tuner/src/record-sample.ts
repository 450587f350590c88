// The records a Redis or Kafka tune writes: the user's sample as it is, one object per line or
// CSV row (fields by name), in timestamp order for a replay, handed out around and around.
import { basename } from 'node:path';
import type { Row } from '@spillway/ingest';
import { inputError, readSample, timeOrder } from './sample-file.js';

export interface RecordSample {
  /** The sample's file name. */
  source: string;
  rows: Row[];
  /** Field names of the first 1,000 rows. */
  fields: string[];
  /** Arrival offsets of the rows (ms from the first), for `replay`; rows are then in timestamp order. */
  timesMs?: number[];
}

/**
 * Reads the sample; every field in `needs` (with the option that names it, for the error) must be
 * in it, and so must the timestamp column of a replay.
 */
export async function loadRecords(
  path: string,
  needs: { field: string; option: string }[],
  timestampColumn?: string,
): Promise<RecordSample> {
  const { rows, fields } = await readSample(path);
  const all =
    timestampColumn === undefined
      ? needs
      : [...needs, { field: timestampColumn, option: '--timestamp-column' }];
  for (const n of all)
    if (!fields.includes(n.field))
      throw inputError(
        `--sample ${basename(path)} has no field "${n.field}" (${n.option}); its fields are ${fields.join(', ')}`,
        { sample: path, column: n.field },
      );
  if (timestampColumn === undefined) return { source: basename(path), rows, fields };
  const timed = timeOrder(rows, timestampColumn, path);
  return {
    source: basename(path),
    rows: timed.order.map((i) => rows[i]!),
    fields,
    timesMs: timed.timesMs,
  };
}

/** Hands out the sample's records one after another, around and around; the position carries on across trials. */
export class SampleCycle {
  private position = 0;
  constructor(private readonly rows: readonly Row[]) {}

  /** Index of the next record within its pass. */
  get offset(): number {
    return this.position % this.rows.length;
  }

  next(): Row {
    return this.rows[this.position++ % this.rows.length]!;
  }
}
