// The repair partners' service-record CSV the ingest benchmarks read: generated, about `bytes`
// long, a quoted note (comma, quote or line break inside) in 2 of 5 rows, CRLF line endings.
// The same rows as NDJSON (one JSON object per line, LF) on request.
import { once } from 'node:events';
import { createWriteStream } from 'node:fs';

const KINDS = ['brakes', 'chain', 'tyre', 'battery', 'lights'];
const NOTES = [
  'pads replaced',
  '"worn, replaced" front and rear',
  'ok',
  'tightened\r\nchecked again',
  'café stop: saddle',
];

export interface ServiceRecordsOptions {
  /** Six fractional digits in every timestamp, which must land as sent. @default false */
  microseconds?: boolean;
  /**
   * `ndjson`: the same rows and values as JSON objects, one per line, with JSON numbers and
   * booleans; `ndjson-text`: the same, every value a JSON string spelled as in the CSV.
   * @default 'csv'
   */
  format?: 'csv' | 'ndjson' | 'ndjson-text';
  /** Write exactly this many rows instead of about `bytes`. */
  rows?: number;
}

const COLUMNS = ['record_id', 'dock_id', 'bike_id', 'serviced_at', 'odometer_km', 'passed', 'kind', 'note'];

/** Writes the file; returns the row count. */
export async function writeServiceRecords(
  path: string,
  bytes: number,
  options: ServiceRecordsOptions = {},
): Promise<number> {
  const format = options.format ?? 'csv';
  const out = createWriteStream(path);
  if (format === 'csv') out.write(`${COLUMNS.join(',')}\r\n`);
  let written = 0;
  let n = 0;
  const start = Date.UTC(2024, 0, 1);
  const more = () => (options.rows === undefined ? written < bytes : n < options.rows);
  while (more()) {
    let block = '';
    for (let i = 0; i < 2000 && (options.rows === undefined || n < options.rows); i++, n++) {
      const note = NOTES[n % NOTES.length]!;
      let at = new Date(start + n * 37_000).toISOString();
      if (options.microseconds) at = at.replace('.000Z', `.${String(n % 1_000_000).padStart(6, '0')}Z`);
      const values = [
        `SR-${n}`,
        `DK-${String(n % 4000).padStart(4, '0')}`,
        (n % 9000) + 1,
        at,
        (n % 50000) / 10,
        n % 7 !== 0,
        KINDS[n % KINDS.length]!,
        note,
      ];
      if (format === 'csv') {
        const quoted = /[",\r\n]/.test(note) ? `"${note.replaceAll('"', '""')}"` : note;
        block += `${values.slice(0, 7).join(',')},${quoted}\r\n`;
      } else {
        const row: Record<string, unknown> = {};
        COLUMNS.forEach((c, i) => {
          row[c] = format === 'ndjson' ? values[i] : String(values[i]);
        });
        block += `${JSON.stringify(row)}\n`;
      }
    }
    written += Buffer.byteLength(block);
    if (!out.write(block)) await once(out, 'drain');
  }
  out.end();
  await once(out, 'close');
  return n;
}
