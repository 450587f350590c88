// The partner upload server example under load and against misbehaving clients: 50 concurrent
// uploads, a client that stalls mid-body, one that never finishes its headers, and the
// concurrent-upload limit — against a real PostgreSQL.
import { once } from 'node:events';
import { request } from 'node:http';
import { type AddressInfo, connect } from 'node:net';
import { afterAll, afterEach, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import {
  createUploadServer,
  SERVICE_RECORDS_DDL,
  type UploadServer,
  type UploadServerOptions,
} from '../../examples/partner-upload-server.js';
import { type TestSchema, waitFor, withSchema } from '../harness/index.js';

const HEADER = 'record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note\r\n';
const row = (n: number) =>
  `SR-${n},DK-${String(n % 4000).padStart(4, '0')},${(n % 900) + 1},2024-05-01T10:00:00.123456Z,${n / 10},true,brakes,ok\r\n`;

let db: TestSchema;
let app: UploadServer | undefined;
let port = 0;
const warnings: Error[] = [];
const onWarning = (w: Error) => void warnings.push(w);
const stderr: string[] = [];
let realWrite: typeof process.stderr.write;

beforeAll(async () => {
  db = await withSchema('ingest_server');
  await db.pool.query(SERVICE_RECORDS_DDL);
});
afterAll(async () => {
  await db?.drop();
});
beforeEach(() => {
  warnings.length = 0;
  stderr.length = 0;
  process.on('warning', onWarning);
  // Everything written to this process's stderr while a test runs (Node prints warnings there).
  realWrite = process.stderr.write;
  process.stderr.write = ((chunk: string | Uint8Array, ...rest: unknown[]) => {
    stderr.push(String(chunk));
    return (realWrite as (...a: unknown[]) => boolean).call(process.stderr, chunk, ...rest);
  }) as typeof process.stderr.write;
});
afterEach(async () => {
  process.stderr.write = realWrite;
  process.off('warning', onWarning);
  await app?.close();
  app = undefined;
});

async function start(options: Omit<UploadServerOptions, 'pool'>): Promise<void> {
  app = createUploadServer({ pool: db.pool, ...options });
  app.server.listen(0, '127.0.0.1');
  await once(app.server, 'listening');
  port = (app.server.address() as AddressInfo).port;
}

interface Answer {
  status: number;
  headers: Record<string, string | string[] | undefined>;
  body: Record<string, unknown>;
}

/** Sends `chunks` as a chunked body; with `stall`, sends them and then nothing more, never ending. */
function upload(
  partner: string,
  chunks: Iterable<string> | AsyncIterable<string>,
  stall = false,
): { answer: Promise<Answer>; closed: Promise<void> } {
  const req = request({
    host: '127.0.0.1',
    port,
    path: `/uploads/${partner}`,
    method: 'POST',
    headers: { 'content-type': 'text/csv' },
  });
  const answer = new Promise<Answer>((resolve, reject) => {
    req.on('response', (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (d) => (text += d));
      res.on('end', () =>
        resolve({ status: res.statusCode ?? 0, headers: res.headers, body: JSON.parse(text || '{}') }),
      );
    });
    req.on('error', reject);
  });
  const closed = new Promise<void>((resolve) => req.on('close', () => resolve()));
  (async () => {
    for await (const c of chunks) if (!req.write(c)) await once(req, 'drain');
    if (!stall) req.end();
  })().catch(() => {});
  return { answer, closed };
}

async function count(partner: string): Promise<number> {
  const { rows } = await db.pool.query('SELECT count(*)::int AS n FROM service_records WHERE partner = $1', [
    partner,
  ]);
  return rows[0].n;
}

describe('the partner upload server example, hardened', () => {
  it('lands 50 concurrent uploads exactly once, with no warning and nothing on stderr', async () => {
    await start({ maxConcurrentUploads: 64, maxBodyBytes: 4 * 1024 * 1024 });
    // Every upload sends its first rows, then waits until the server holds all 50 at once.
    let arrived = 0;
    let allIn: () => void = () => {};
    const all = new Promise<void>((resolve) => (allIn = resolve));
    app!.server.on('request', () => {
      if (++arrived === 50) allIn();
    });
    const uploads = Array.from({ length: 50 }, (_, u) => {
      const rows = Array.from({ length: 1000 }, (_, i) => row(u * 1000 + i + 1));
      async function* body() {
        yield HEADER + rows.slice(0, 100).join('');
        await all;
        for (let k = 1; k < 10; k++) yield rows.slice(k * 100, k * 100 + 100).join('');
      }
      return upload('fifty', body()).answer;
    });
    const answers = await Promise.all(uploads);
    expect(arrived).toBe(50);
    expect(answers.map((a) => a.status)).toEqual(Array(50).fill(200));
    expect(answers.map((a) => a.body.rowsWritten)).toEqual(Array(50).fill(1000));
    const { rows } = await db.pool.query(
      `SELECT count(*)::int AS n, count(DISTINCT record_id)::int AS ids,
              count(*) FILTER (WHERE serviced_at = '2024-05-01T10:00:00.123456Z')::int AS exact
         FROM service_records WHERE partner = 'fifty'`,
    );
    expect(rows[0]).toEqual({ n: 50_000, ids: 50_000, exact: 50_000 });
    expect(warnings.map((w) => w.name)).toEqual([]);
    expect(stderr).toEqual([]);
  });

  it('cuts off a client that stalls mid-body after idleTimeoutMs, keeping its complete rows and dropping the partial one', async () => {
    await start({ idleTimeoutMs: 300 });
    const rows = Array.from({ length: 100 }, (_, i) => row(700_000 + i)).join('');
    const partial = row(700_100).slice(0, 20);
    const { answer, closed } = upload('stall', [HEADER, rows, partial], true);
    answer.catch(() => {}); // the server closes without answering
    await closed;
    await expect(answer).rejects.toThrow(/socket hang up|ECONNRESET/);
    // The aborted ingest flushes what it had read before giving up.
    expect(
      await waitFor(
        'the stalled upload to settle',
        async () => ((await count('stall')) === 100 ? true : undefined),
        { timeoutMs: 15_000 },
      ),
    ).toBe(true);
    const { rows: partialRow } = await db.pool.query(
      `SELECT 1 FROM service_records WHERE record_id = 'SR-700100'`,
    );
    expect(partialRow).toEqual([]);
    expect(warnings).toEqual([]);
  });

  it('answers 408 and closes a connection whose headers never finish, after headersTimeoutMs', async () => {
    await start({ headersTimeoutMs: 300, requestTimeoutMs: 600 });
    const socket = connect(port, '127.0.0.1');
    await once(socket, 'connect');
    socket.write('POST /uploads/slow HTTP/1.1\r\nHost: x\r\n');
    let text = '';
    socket.on('data', (d) => (text += d));
    await once(socket, 'close');
    expect(text).toMatch(/^HTTP\/1\.1 408/);
  });

  it('answers 503 with Retry-After past maxConcurrentUploads, and takes the upload once a slot is free', async () => {
    await start({ maxConcurrentUploads: 1, retryAfterSeconds: 7, idleTimeoutMs: 500 });
    // The server's own request handler runs first: once this listener fires, the slot is taken.
    const taken = once(app!.server, 'request');
    const first = upload('limit', [HEADER, row(800_001)], true);
    first.answer.catch(() => {});
    await taken;
    const refused = await upload('limit', [HEADER, row(800_002)]).answer;
    expect(refused.status).toBe(503);
    expect(refused.headers['retry-after']).toBe('7');
    expect(refused.body).toEqual({ error: 'too many uploads at once, retry later' });
    await first.closed; // cut off at the idle timeout: the slot is free again
    const again = await waitFor(
      'a slot to free up',
      async () => {
        const a = await upload('limit', [HEADER, row(800_003)]).answer;
        return a.status === 200 ? a : undefined;
      },
      { timeoutMs: 15_000 },
    );
    expect(again.body).toMatchObject({ rowsWritten: 1, durable: true });
    expect(
      (
        await db.pool.query(
          `SELECT record_id FROM service_records WHERE partner = 'limit' ORDER BY record_id`,
        )
      ).rows,
    ).toEqual([{ record_id: 'SR-800001' }, { record_id: 'SR-800003' }]);
  });
});
