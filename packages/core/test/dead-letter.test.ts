import { mkdir, mkdtemp, readFile, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { fileDeadLetter, Sink, StoreError } from '../src/index.js';
import { ManualClock } from '../src/testing.js';
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

  it('fails when it is created, not at the first dead letter, when the directory is missing', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'spillway-dl-'));
    const path = join(dir, 'no-such-dir', 'dead.ndjson');
    expect(() => fileDeadLetter(path)).toThrow(
      expect.objectContaining({
        code: 'SPILLWAY_DEAD_LETTER_UNWRITABLE',
        driverCode: 'ENOENT',
        message: expect.stringContaining(path),
        details: { path, errno: 'ENOENT' },
      }),
    );
  });

  it('fails at creation when the path is a directory or sits under a file', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'spillway-dl-'));
    await mkdir(join(dir, 'taken'));
    await writeFile(join(dir, 'plain'), '');
    expect(() => fileDeadLetter(join(dir, 'taken'))).toThrow(
      expect.objectContaining({ code: 'SPILLWAY_DEAD_LETTER_UNWRITABLE', driverCode: 'EISDIR' }),
    );
    expect(() => fileDeadLetter(join(dir, 'plain', 'dead.ndjson'))).toThrow(
      expect.objectContaining({ code: 'SPILLWAY_DEAD_LETTER_UNWRITABLE', driverCode: 'ENOTDIR' }),
    );
  });

  // A root user may write anywhere: the permission check can only be seen as another user.
  it.skipIf(process.getuid?.() === 0)('fails at creation when the directory is not writable', async () => {
    const { chmod } = await import('node:fs/promises');
    const dir = await mkdtemp(join(tmpdir(), 'spillway-dl-'));
    await chmod(dir, 0o500);
    expect(() => fileDeadLetter(join(dir, 'dead.ndjson'))).toThrow(
      expect.objectContaining({ code: 'SPILLWAY_DEAD_LETTER_UNWRITABLE', driverCode: 'EACCES' }),
    );
  });

  it('rejects an empty path as an invalid option', () => {
    expect(() => fileDeadLetter('')).toThrow(
      expect.objectContaining({ name: 'TypeError', code: 'SPILLWAY_INVALID_OPTION' }),
    );
  });
});
