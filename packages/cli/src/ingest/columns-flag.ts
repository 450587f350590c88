import { readFile } from 'node:fs/promises';
import { COLUMN_TYPES, type ColumnSpec, type ColumnType } from '@spillway/ingest';
import { UsageError } from './usage-error.js';

/**
 * Reads `--columns name[:type][!],…` (`!` = required), e.g.
 * `record_id!,bike_id:integer!,serviced_at:timestamp!,odometer_km:number,note`.
 */
export function parseColumnsFlag(text: string): ColumnSpec[] {
  const specs = text
    .split(',')
    .map((s) => s.trim())
    .filter((s) => s.length > 0)
    .map((s): ColumnSpec => {
      const m = /^([^:!]+)(?::([a-z]+))?(!)?$/.exec(s);
      if (!m) throw new UsageError(`--columns: cannot read "${s}" (expected name[:type][!])`);
      const type = (m[2] ?? 'string') as ColumnType;
      if (!COLUMN_TYPES.includes(type))
        throw new UsageError(`--columns: "${m[2]}" is not a type (${COLUMN_TYPES.join(', ')})`);
      return { name: m[1]!.trim(), type, required: m[3] === '!' };
    });
  if (specs.length === 0) throw new UsageError('--columns: no column named');
  return specs;
}

/** Reads `--schema file.json`: a JSON array of column specs `{ name, type, required, pattern, min, max, enum, from }`. */
export async function readSchemaFile(path: string): Promise<ColumnSpec[]> {
  let value: unknown;
  try {
    value = JSON.parse(await readFile(path, 'utf8'));
  } catch (error) {
    throw new UsageError(`--schema: cannot read ${path} as JSON (${(error as Error).message})`);
  }
  const list = Array.isArray(value) ? value : (value as { columns?: unknown })?.columns;
  if (!Array.isArray(list))
    throw new UsageError('--schema: expected a JSON array of column specs (or { "columns": [...] })');
  return list as ColumnSpec[];
}
