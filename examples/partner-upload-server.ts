// Tandem Bikes: repair partners upload their service records (CSV or NDJSON, any size, chunked
// or not) to this server, which streams them into PostgreSQL and answers only once every row is
// durable, with the ingest summary. Re-uploading a file is safe: rows are upserted on record_id.
//
//   npm run build   # the example imports the built packages
//   DATABASE_URL=postgres://postgres@127.0.0.1:5432/test node --import tsx examples/partner-upload-server.ts
//   (it creates the service_records table if it is missing: SERVICE_RECORDS_DDL)
//   (PORT, REJECTS_DIR and MAX_CONCURRENT_UPLOADS may be set in the environment too)
//   curl -T examples/data/service-records.csv -H 'Content-Type: text/csv' http://127.0.0.1:8080/uploads/velofix
//
// Answers: 200 + summary (rows with problems are listed in it by line, column and reason, never
// by content); 400 for an upload that cannot be read as a whole (bad header, too many rejects);
// 413 past the size limit (before reading when Content-Length says so; for a chunked body, once
// the limit is passed — rows before it are written, and a retried upload overwrites them);
// 415 for a content type other than text/csv or application/x-ndjson; 503 when the store failed
// (nothing reported written that is not durable), or with Retry-After when `maxConcurrentUploads`
// uploads are already running; 408 when the headers or the whole request take too long. A client
// that stops sending mid-body is cut off after `idleTimeoutMs`: its complete rows stay written, the
// partial row does not land.
//
// Settings to copy into your own server (UPLOAD_SERVER_LIMITS below): Node's own defaults let a
// stalled client hold a connection for minutes and put no limit on concurrent uploads.
import { randomUUID } from 'node:crypto';
import { createServer, type IncomingMessage, type Server, type ServerResponse } from 'node:http';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import type { Sink } from '@spillway/core';
import {
  type ColumnSpec,
  formatFromContentType,
  IngestError,
  type IngestSummary,
  ingest,
  RejectFile,
  type Row,
} from '@spillway/ingest';
import { postgresSink } from '@spillway/postgres';
import pg from 'pg';

export const SERVICE_RECORD_COLUMNS: ColumnSpec[] = [
  { name: 'record_id', required: true, pattern: '^SR-\\d+$' },
  { name: 'dock_id', required: true, pattern: '^DK-\\d{4}$' },
  { name: 'bike_id', type: 'integer', required: true, min: 1 },
  { name: 'serviced_at', type: 'timestamp', required: true },
  { name: 'odometer_km', type: 'number', min: 0 },
  { name: 'passed', type: 'boolean' },
  { name: 'kind', enum: ['brakes', 'chain', 'tyre', 'battery', 'lights'] },
  { name: 'note', max: 2000 },
];

export const SERVICE_RECORDS_DDL = `CREATE TABLE IF NOT EXISTS service_records (
  record_id   text PRIMARY KEY,
  dock_id     text NOT NULL,
  bike_id     int  NOT NULL,
  serviced_at timestamptz NOT NULL,
  odometer_km double precision,
  passed      boolean,
  kind        text,
  note        text,
  partner     text NOT NULL
)`;

/** The server-level limits, with the values this example uses. */
export const UPLOAD_SERVER_LIMITS = {
  /** Time for a client to send the request headers (Node answers 408). */
  headersTimeoutMs: 10_000,
  /** Time for a whole upload, headers to last byte (Node answers 408): 256 MiB at ~1 MB/s. */
  requestTimeoutMs: 5 * 60_000,
  /** A connection with no bytes moving for this long is closed (a stalled client, an idle keep-alive). */
  idleTimeoutMs: 30_000,
  /** Uploads running at once; one more is answered 503 with Retry-After. */
  maxConcurrentUploads: 16,
  /** Seconds a client refused for the limit is told to wait. */
  retryAfterSeconds: 5,
} as const;

export interface UploadServerOptions {
  pool: pg.Pool;
  /** @default 'service_records' */
  table?: string;
  /** Largest accepted body. @default 256 MiB */
  maxBodyBytes?: number;
  /** More rejected rows than this fail the upload with 400 (rows written before stay). @default 1000 */
  maxRejects?: number;
  /** Where each upload's reject file (0600) goes; none when undefined. */
  rejectsDir?: string;
  /** Called once per finished upload, with counts only. */
  log?: (line: string) => void;
  /** @default UPLOAD_SERVER_LIMITS.headersTimeoutMs */
  headersTimeoutMs?: number;
  /** @default UPLOAD_SERVER_LIMITS.requestTimeoutMs */
  requestTimeoutMs?: number;
  /** @default UPLOAD_SERVER_LIMITS.idleTimeoutMs */
  idleTimeoutMs?: number;
  /** @default UPLOAD_SERVER_LIMITS.maxConcurrentUploads */
  maxConcurrentUploads?: number;
  /** @default UPLOAD_SERVER_LIMITS.retryAfterSeconds */
  retryAfterSeconds?: number;
}

export interface UploadServer {
  server: Server;
  sink: Sink<Row>;
  /** Stops accepting connections and closes the sink (every accepted row becomes terminal). */
  close(): Promise<void>;
}

export function createUploadServer(options: UploadServerOptions): UploadServer {
  const maxBodyBytes = options.maxBodyBytes ?? 256 * 1024 * 1024;
  const columns = [...SERVICE_RECORD_COLUMNS.map((c) => c.name), 'partner'];
  // One sink for every upload: concurrent uploads share batches; each upload's rows keep their order.
  const sink = postgresSink<Row>({
    pool: options.pool,
    table: options.table ?? 'service_records',
    columns,
    map: (r) => columns.map((c) => r[c]),
    mode: 'upsert',
    conflict: { key: ['record_id'] },
    maxRecords: 2000,
    maxAgeMs: 500,
  });
  const log = options.log ?? (() => {});

  const limits = { ...UPLOAD_SERVER_LIMITS, ...definedOf(options) };
  let running = 0;

  const server = createServer(
    {
      headersTimeout: limits.headersTimeoutMs,
      requestTimeout: limits.requestTimeoutMs,
      // How often Node checks the two timeouts above (its default, 30 s, would let them overrun).
      connectionsCheckingInterval: Math.min(1000, limits.headersTimeoutMs),
    },
    (req, res) => {
      if (running >= limits.maxConcurrentUploads) {
        // Refuse before reading the body; close so the client stops sending.
        return reply(res, 503, { error: 'too many uploads at once, retry later' }, true, {
          'retry-after': String(limits.retryAfterSeconds),
        });
      }
      running++;
      handle(req, res)
        .catch((error: unknown) => {
          if (!res.headersSent) reply(res, 500, { error: 'internal error' });
          log(`upload failed: ${(error as Error).message}`);
        })
        .finally(() => running--);
    },
  );
  // No bytes moving for idleTimeoutMs: close the connection (a stalled upload is then aborted, its
  // complete rows kept). Setting the server's 'timeout' listener replaces Node's destroy-on-timeout.
  // While the store holds the upload back (backpressure) the body is not read either: keep
  // idleTimeoutMs well above the longest write you expect.
  server.setTimeout(limits.idleTimeoutMs, (socket) => socket.destroy());
  server.keepAliveTimeout = Math.min(5000, limits.idleTimeoutMs);

  async function handle(req: IncomingMessage, res: ServerResponse): Promise<void> {
    const match = /^\/uploads\/([a-z0-9-]{1,64})$/.exec(req.url ?? '');
    // PUT (what `curl -T` sends) or POST: a re-sent upload is harmless either way (upsert).
    if ((req.method !== 'POST' && req.method !== 'PUT') || !match)
      return reply(res, 404, { error: 'POST or PUT /uploads/<partner>' });
    const partner = match[1]!;
    const format = formatFromContentType(req.headers['content-type']);
    if (!format) return reply(res, 415, { error: 'Content-Type must be text/csv or application/x-ndjson' });
    const declared = Number(req.headers['content-length']);
    if (Number.isFinite(declared) && declared > maxBodyBytes) {
      // Refuse before reading a byte; close so the client stops sending.
      return reply(res, 413, { error: `body larger than ${maxBodyBytes} bytes` }, true);
    }
    const id = randomUUID();
    const rejects = options.rejectsDir
      ? new RejectFile(join(options.rejectsDir, `${partner}-${id}.ndjson`))
      : undefined;
    const aborted = new AbortController();
    // Once the whole body is in, waiting for the store is the server's time, not an idle client's.
    req.once('end', () => req.socket.setTimeout(0));
    req.once('close', () => {
      if (!req.complete) aborted.abort();
    });
    try {
      const summary = await ingest(req, sink, {
        format,
        columns: SERVICE_RECORD_COLUMNS,
        map: (row) => ({ ...row, partner }),
        maxInputBytes: maxBodyBytes,
        maxRejects: options.maxRejects ?? 1000,
        sourceName: `${partner}/${id}`,
        signal: aborted.signal,
        ...(rejects && { rejects }),
      });
      log(
        `upload ${partner}/${id}: ${summary.rowsWritten} written, ${summary.rowsRejected} rejected in ${summary.durationMs} ms`,
      );
      reply(res, 200, { upload: id, ...publicSummary(summary) });
    } catch (error) {
      if (!(error instanceof IngestError)) throw error;
      const body = { upload: id, error: error.message, ...publicSummary(error.summary) };
      log(`upload ${partner}/${id} stopped (${error.reason}): ${error.summary.rowsWritten} written`);
      if (error.reason === 'too-large') reply(res, 413, body, true);
      else if (error.reason === 'header' || error.reason === 'reject-limit') reply(res, 400, body, true);
      else if (error.reason === 'sink') reply(res, 503, body);
      else if (!aborted.signal.aborted) reply(res, 400, body, true);
    } finally {
      await rejects?.close();
    }
  }

  return {
    server,
    sink,
    async close() {
      await new Promise<void>((resolve) => server.close(() => resolve()));
      await sink.close();
    },
  };
}

/** The limits given in `options` (undefined ones left to the defaults). */
function definedOf(options: UploadServerOptions): Partial<Record<keyof typeof UPLOAD_SERVER_LIMITS, number>> {
  const out: Partial<Record<keyof typeof UPLOAD_SERVER_LIMITS, number>> = {};
  for (const k of Object.keys(UPLOAD_SERVER_LIMITS) as (keyof typeof UPLOAD_SERVER_LIMITS)[]) {
    const v = options[k];
    if (v !== undefined) out[k] = v;
  }
  return out;
}

function publicSummary(s: IngestSummary) {
  const { source: _source, ...rest } = s;
  return rest;
}

/** Sends JSON. With `close`, the connection is closed after the answer, so an unread body is dropped. */
function reply(
  res: ServerResponse,
  status: number,
  body: unknown,
  close = false,
  headers: Record<string, string> = {},
): void {
  const text = `${JSON.stringify(body)}\n`;
  res.writeHead(status, {
    'content-type': 'application/json',
    'content-length': Buffer.byteLength(text),
    ...(close && { connection: 'close' }),
    ...headers,
  });
  res.end(text, () => {
    if (close) res.req.destroy();
  });
}

if (import.meta.url === pathToFileURL(process.argv[1] ?? '').href) {
  const pool = new pg.Pool({
    connectionString: process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/test',
    max: 4,
  });
  await pool.query(SERVICE_RECORDS_DDL);
  const { server, close } = createUploadServer({
    pool,
    ...(process.env.REJECTS_DIR && { rejectsDir: process.env.REJECTS_DIR }),
    ...(process.env.MAX_CONCURRENT_UPLOADS && {
      maxConcurrentUploads: Number(process.env.MAX_CONCURRENT_UPLOADS),
    }),
    log: (l) => console.log(l),
  });
  const port = Number(process.env.PORT ?? 8080);
  server.listen(port, '127.0.0.1', () =>
    console.log(`partner uploads on http://127.0.0.1:${port}/uploads/<partner>`),
  );
  const stop = async () => {
    await close();
    await pool.end();
    process.exit(0);
  };
  process.once('SIGTERM', stop);
  process.once('SIGINT', stop);
}
