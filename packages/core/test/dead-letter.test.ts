import { mkdtemp, readFile, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { fileDeadLetter, ManualClock, Sink, StoreError } from '../src/index.js';
import { BadRecord, FakeAdapter } from './fakes.js';

describe('file dead-letter target', () => {
  it('appends one JSON line per record with error, code, reason, time and metadata, owner-only', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'spillway-dl-'));
    const path = join(dir, 'dead.ndjson');
    const clock = new ManualClock();
    const adapter = new FakeAdapter<{ dock: string; bikes: number }>();
    adapter.behave = (b) => {
      if (b.records.some((r) => r.bikes < 0)) {
        throw new StoreError('new row violates check constraint "bikes_nonneg"', {
          driverCode: '23514',
          details: { constraint: 'bikes_nonneg' },
          cause: new BadRecord('check'),
        });
      }
    };
    adapter.classify = () => 'split';
    const sink = new Sink(adapter, { maxRecords: 10, clock, deadLetter: fileDeadLetter(path) });
    await sink.write({ dock: 'D-101', bikes: 4 }, { topic: 'dock-status', partition: 2, offset: '41' });
    await sink.write({ dock: 'D-102', bikes: -1 }, { topic: 'dock-status', partition: 2, offset: '42' });
    await sink.close();
    const lines = (await readFile(path, 'utf8')).trim().split('\n');
    expect(lines).toHaveLength(1);
    const line = JSON.parse(lines[0]!);
    expect(line).toMatchObject({
      sink: 'fake',
      reason: 'rejected',
      code: 'SPILLWAY_STORE_ERROR',
      driverCode: '23514',
      details: { constraint: 'bikes_nonneg' },
      meta: { topic: 'dock-status', partition: 2, offset: '42' },
      record: { dock: 'D-102', bikes: -1 },
    });
    expect(new Date(line.time).toISOString()).toBe(line.time);
    expect((await stat(path)).mode & 0o777).toBe(0o600);
  });

  it('tightens an existing file to 0600 and keeps binary records as base64', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'spillway-dl-'));
    const path = join(dir, 'dead.ndjson');
    await writeFile(path, '', { mode: 0o644 });
    const target = fileDeadLetter<Buffer>(path);
    await target.write([
      {
        sink: 's',
        record: Buffer.from([0, 1, 255]),
        meta: undefined,
        reason: 'decode',
        error: new Error('bad bytes'),
        time: 0,
      },
    ]);
    await target.close();
    const line = JSON.parse((await readFile(path, 'utf8')).trim());
    expect(line.record).toEqual({ base64: Buffer.from([0, 1, 255]).toString('base64') });
    expect((await stat(path)).mode & 0o777).toBe(0o600);
  });
});
