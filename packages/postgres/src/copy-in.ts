/**
 * `COPY … FROM STDIN` as a pg submittable (an object with `submit(connection)` that `pg`'s
 * `client.query()` runs in its queue) that sends data as soon as it has it, without waiting for
 * the server to ask.
 *
 * A client that waits for the server's CopyInResponse before it sends data pays a round trip per
 * batch, and on a busy event loop that round trip lasts as long as whatever JavaScript runs before
 * the response is read, while the server sits idle. The server reads its connection in order, so
 * CopyData that follows the COPY statement is read once copy-in mode has begun; and when the COPY
 * fails, "any subsequent CopyData, CopyDone, or CopyFail messages issued by the frontend will
 * simply be dropped" (PostgreSQL documentation, Frontend/Backend Protocol, "COPY Operations").
 * Chunks sent while the rest of a batch is still being encoded let the server parse the first
 * rows meanwhile.
 */

/** The part of pg's `Connection` this uses (methods of pg's own connection class). */
interface CopyConnection {
  query(text: string): void;
  sendCopyFromChunk(chunk: Buffer): void;
  endCopyFrom(): void;
  sendCopyFail(message: string): void;
}

export class CopyIn {
  /** Resolves with the server's row count once the COPY completed; rejects with its error. */
  readonly done: Promise<number>;
  private settle: { resolve(rows: number): void; reject(error: unknown): void } | undefined;
  private connection: CopyConnection | undefined;
  /** Chunks given before pg submitted the statement (the client was busy). */
  private queued: Buffer[] = [];
  private ending: 'done' | { fail: string } | undefined;
  private rows = 0;

  constructor(readonly text: string) {
    this.done = new Promise<number>((resolve, reject) => {
      this.settle = { resolve, reject };
    });
  }

  /** Sends a chunk of COPY data (or queues it until the statement is out). */
  send(chunk: Buffer): void {
    if (this.settle === undefined || this.ending !== undefined) return;
    if (this.connection !== undefined) this.connection.sendCopyFromChunk(chunk);
    else this.queued.push(chunk);
  }

  /** Ends the data (CopyDone). */
  end(): void {
    this.close('done');
  }

  /** Abandons the COPY (CopyFail): the server rolls it back and answers with an error. */
  fail(message: string): void {
    this.close({ fail: message });
  }

  /** Called by pg when the connection is free: the statement, then whatever data is ready. */
  submit(connection: CopyConnection): void {
    connection.query(this.text);
    this.connection = connection;
    for (const chunk of this.queued) connection.sendCopyFromChunk(chunk);
    this.queued = [];
    if (this.ending !== undefined) this.sendEnd(connection, this.ending);
  }

  /** pg wraps this to clear its `query_timeout` timer; calling it on the way out does that. */
  callback(): void {}

  // Data is sent without being asked for: nothing to do when the server asks.
  handleCopyInResponse(): void {}

  handleCommandComplete(message: { text?: string }): void {
    const m = /^COPY (\d+)/.exec(message?.text ?? '');
    if (m) this.rows = Number(m[1]);
  }

  handleReadyForQuery(): void {
    this.finish(undefined);
  }

  /** An ErrorResponse from the server, or the connection's own error (pg reports both here). */
  handleError(error: unknown): void {
    this.finish(error ?? new Error('COPY failed'));
  }

  // Messages a COPY FROM does not get.
  handleRowDescription(): void {}
  handleDataRow(): void {}
  handleEmptyQuery(): void {}
  handlePortalSuspended(): void {}
  handleCopyData(): void {}

  private close(how: 'done' | { fail: string }): void {
    if (this.settle === undefined || this.ending !== undefined) return;
    this.ending = how;
    if (this.connection !== undefined) this.sendEnd(this.connection, how);
  }

  private sendEnd(connection: CopyConnection, how: 'done' | { fail: string }): void {
    if (how === 'done') connection.endCopyFrom();
    else connection.sendCopyFail(how.fail);
  }

  private finish(error: unknown): void {
    const settle = this.settle;
    if (settle === undefined) return;
    this.settle = undefined;
    // Nothing more goes to this connection: it belongs to the next statement now.
    this.connection = undefined;
    this.queued = [];
    this.callback();
    if (error === undefined) settle.resolve(this.rows);
    else settle.reject(error);
  }
}
