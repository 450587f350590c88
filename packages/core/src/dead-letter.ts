import { accessSync, constants, statSync } from 'node:fs';
import { chmod, type FileHandle, open } from 'node:fs/promises';
import { dirname, resolve } from 'node:path';
import { driverCodeOf, messageOf, SpillwayError } from './errors.js';
import { invalidOption } from './option-checks.js';
import type { DeadLetter, DeadLetterTarget, RecordMeta } from './types.js';

export interface FileDeadLetterOptions<T> {
  /**
   * Turns a record into a JSON value for the file. Buffers become `{ "base64": "…" }`.
   * @default the record itself (JSON-serialisable values)
   */
  serialize?: (record: T) => unknown;
  /**
   * Flush the file to disk (fsync) after each write, so a dead-lettered record, whose offset may
   * then be committed past, survives a crash.
   * @default true
   */
  fsync?: boolean;
}

/** One line of a dead-letter file (JSON Lines). */
export interface DeadLetterLine {
  time: string;
  sink: string;
  reason: string;
  code: string | undefined;
  driverCode: string | undefined;
  error: string;
  details: Record<string, unknown> | undefined;
  meta: Record<string, unknown> | undefined;
  record: unknown;
}

/** The JSON form of a dead letter, as written to files and as sent to a dead-letter sink. */
export function deadLetterLine<T>(
  letter: DeadLetter<T>,
  serialize: (record: T) => unknown = (r) => r,
): DeadLetterLine {
  const err = letter.error;
  return {
    time: new Date(letter.time).toISOString(),
    sink: letter.sink,
    reason: letter.reason,
    code: err instanceof SpillwayError ? err.code : undefined,
    driverCode: driverCodeOf(err),
    error: messageOf(err),
    details:
      err instanceof SpillwayError && Object.keys(err.details).length > 0 ? { ...err.details } : undefined,
    meta: letter.meta ? metaJson(letter.meta) : undefined,
    record: serialize(letter.record),
  };
}

function metaJson(meta: RecordMeta): Record<string, unknown> {
  const out: Record<string, unknown> = { ...meta };
  if (typeof meta.offset === 'bigint') out.offset = meta.offset.toString();
  return out;
}

/** JSON.stringify replacer: Buffers and byte arrays as base64, bigints as strings. */
function replacer(_key: string, value: unknown): unknown {
  if (typeof value === 'bigint') return value.toString();
  if (
    value &&
    typeof value === 'object' &&
    (value as { type?: unknown }).type === 'Buffer' &&
    Array.isArray((value as { data?: unknown }).data)
  ) {
    return { base64: Buffer.from((value as { data: number[] }).data).toString('base64') };
  }
  if (value instanceof Uint8Array) return { base64: Buffer.from(value).toString('base64') };
  return value;
}

/**
 * A dead-letter target that appends JSON Lines to a file created owner-read/write only (0600):
 * dead letters hold raw records, which may contain personal data. `reopen()` after renaming the
 * file rotates it.
 */
export class FileDeadLetter<T = unknown> implements DeadLetterTarget<T> {
  private handle: FileHandle | undefined;
  private opening: Promise<FileHandle> | undefined;
  private readonly serialize: (record: T) => unknown;
  private readonly fsync: boolean;
  /** Serialises writes so lines never interleave. */
  private tail: Promise<void> = Promise.resolve();

  constructor(
    readonly path: string,
    options: FileDeadLetterOptions<T> = {},
  ) {
    if (typeof path !== 'string' || path.length === 0)
      throw invalidOption('path', 'a non-empty string', path);
    checkWritable(path);
    this.serialize = options.serialize ?? ((r) => r);
    this.fsync = options.fsync ?? true;
  }

  private file(): Promise<FileHandle> {
    if (this.handle) return Promise.resolve(this.handle);
    this.opening ??= (async () => {
      const fh = await open(this.path, 'a', 0o600);
      // The mode above applies only when the file is created; tighten an existing one too.
      await chmod(this.path, 0o600);
      this.handle = fh;
      this.opening = undefined;
      return fh;
    })();
    return this.opening;
  }

  write(letters: readonly DeadLetter<T>[]): Promise<void> {
    const run = this.tail.then(async () => {
      const text = letters
        .map((l) => `${JSON.stringify(deadLetterLine(l, this.serialize), replacer)}\n`)
        .join('');
      const fh = await this.file();
      await fh.appendFile(text, 'utf8');
      if (this.fsync) await fh.sync();
    });
    this.tail = run.catch(() => {});
    return run;
  }

  /** Closes the file; the next write opens `path` again (use after renaming it to rotate). */
  async reopen(): Promise<void> {
    await this.tail;
    const fh = this.handle;
    this.handle = undefined;
    await fh?.close();
  }

  async close(): Promise<void> {
    await this.reopen();
  }
}

/**
 * Throws `SPILLWAY_DEAD_LETTER_UNWRITABLE` (naming the path and the errno) unless the file can be
 * created or appended to: its directory exists and is writable, and the file, if it exists, is a
 * writable regular file. Checked when the target is built, not at the first dead letter, which may
 * come hours later with records in hand that then have nowhere to go.
 */
function checkWritable(path: string): void {
  const full = resolve(path);
  const dir = dirname(full);
  function fail(what: string, code: string, cause?: unknown): never {
    throw new SpillwayError(
      'SPILLWAY_DEAD_LETTER_UNWRITABLE',
      `Dead-letter file "${path}" cannot be written: ${what} (${code})`,
      { cause, driverCode: code, details: { path: full, errno: code } },
    );
  }
  let dirStat: ReturnType<typeof statSync>;
  try {
    dirStat = statSync(dir);
  } catch (e) {
    fail(`cannot open its directory "${dir}"`, driverCodeOf(e) ?? 'ENOENT', e);
  }
  if (!dirStat.isDirectory()) fail(`"${dir}" is not a directory`, 'ENOTDIR');
  let fileStat: ReturnType<typeof statSync> | undefined;
  try {
    fileStat = statSync(full);
  } catch {
    fileStat = undefined;
  }
  if (fileStat?.isDirectory()) fail('it is a directory', 'EISDIR');
  const target = fileStat === undefined ? dir : full;
  try {
    accessSync(target, fileStat === undefined ? constants.W_OK | constants.X_OK : constants.W_OK);
  } catch (e) {
    fail(`no write permission on "${target}"`, driverCodeOf(e) ?? 'EACCES', e);
  }
}

export function fileDeadLetter<T = unknown>(
  path: string,
  options?: FileDeadLetterOptions<T>,
): FileDeadLetter<T> {
  return new FileDeadLetter<T>(path, options);
}

/** Something with the parts of a Sink that a dead-letter target needs. */
export interface DeadLetterSinkLike {
  write(record: DeadLetterLine, meta?: RecordMeta): Promise<void>;
  flush(): Promise<void>;
}

/**
 * Uses another sink as the dead-letter target: each dead letter is written to it as a
 * `DeadLetterLine`, and the write resolves only when that sink has made them durable.
 */
export function sinkDeadLetter<T>(
  target: DeadLetterSinkLike,
  serialize?: (record: T) => unknown,
): DeadLetterTarget<T> {
  return {
    async write(letters) {
      // No meta: the source coordinates travel inside the line, and must not drive the target's progress.
      for (const l of letters) await target.write(deadLetterLine(l, serialize));
      await target.flush();
    },
  };
}
