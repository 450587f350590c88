import type { IngestFormat } from './options.js';

/**
 * The format an HTTP `Content-Type` names: `text/csv` (RFC 7111) → csv; `application/x-ndjson`,
 * `application/jsonl`, `application/x-jsonlines` (the media types in use for JSON Lines; none is
 * registered) → ndjson. Parameters such as `; charset=utf-8` are ignored.
 */
export function formatFromContentType(contentType: string | undefined): IngestFormat | undefined {
  if (!contentType) return undefined;
  const type = contentType.split(';')[0]!.trim().toLowerCase();
  if (type === 'text/csv') return 'csv';
  if (
    type === 'application/x-ndjson' ||
    type === 'application/jsonl' ||
    type === 'application/x-jsonlines' ||
    type === 'application/jsonlines'
  )
    return 'ndjson';
  return undefined;
}
