// The repair partners' service-record CSV the ingest benchmarks read: generated, about `bytes`
// long, a quoted note (comma, quote or line break inside) in 2 of 5 rows, CRLF line endings.
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
}

/** Writes the file; returns the row count. */
export async function writeServiceRecords(
  path: string,
  bytes: number,
  options: ServiceRecordsOptions = {},
): Promise<number> {
  const out = createWriteStream(path);
  out.write('record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note\r\n');
  let written = 0;
  let n = 0;
  const start = Date.UTC(2024, 0, 1);
  while (written < bytes) {
    let block = '';
    for (let i = 0; i < 2000; i++, n++) {
      const note = NOTES[n % NOTES.length]!;
      const quoted = /[",\r\n]/.test(note) ? `"${note.replaceAll('"', '""')}"` : note;
      let at = new Date(start + n * 37_000).toISOString();
      if (options.microseconds) at = at.replace('.000Z', `.${String(n % 1_000_000).padStart(6, '0')}Z`);
      block += `SR-${n},DK-${String(n % 4000).padStart(4, '0')},${(n % 9000) + 1},${at},${(n % 50000) / 10},${n % 7 === 0 ? 'false' : 'true'},${KINDS[n % KINDS.length]},${quoted}\r\n`;
    }
    written += Buffer.byteLength(block);
    if (!out.write(block)) await once(out, 'drain');
  }
  out.end();
  await once(out, 'close');
  return n;
}
