import { describe, expect, it } from 'vitest';
import { CopyIn } from '../src/copy-in.js';

/** Records what a submittable sends, in order (a stand-in for pg's connection: this is our own logic). */
function connection() {
  const sent: string[] = [];
  return {
    sent,
    query: (text: string) => sent.push(`Q ${text}`),
    sendCopyFromChunk: (chunk: Buffer) => sent.push(`d ${chunk.toString()}`),
    endCopyFrom: () => sent.push('c'),
    sendCopyFail: (message: string) => sent.push(`f ${message}`),
  };
}

describe('CopyIn', () => {
  it('sends the statement, then every chunk and CopyDone without waiting for CopyInResponse', async () => {
    const c = connection();
    const copy = new CopyIn('COPY t FROM STDIN');
    copy.submit(c);
    copy.send(Buffer.from('1\n'));
    copy.send(Buffer.from('2\n'));
    copy.end();
    expect(c.sent).toEqual(['Q COPY t FROM STDIN', 'd 1\n', 'd 2\n', 'c']);
    copy.handleCopyInResponse();
    copy.handleCommandComplete({ text: 'COPY 2' });
    copy.handleReadyForQuery();
    await expect(copy.done).resolves.toBe(2);
  });

  it('queues data given before pg submits it (the client was busy) and sends it in order', async () => {
    const c = connection();
    const copy = new CopyIn('COPY t FROM STDIN');
    copy.send(Buffer.from('1\n'));
    copy.end();
    expect(c.sent).toEqual([]);
    copy.submit(c);
    expect(c.sent).toEqual(['Q COPY t FROM STDIN', 'd 1\n', 'c']);
  });

  it('rejects with the server error and sends nothing more on that connection afterwards', async () => {
    const c = connection();
    const copy = new CopyIn('COPY t FROM STDIN');
    copy.submit(c);
    copy.send(Buffer.from('1\n'));
    const refused = Object.assign(new Error('relation "t" does not exist'), { code: '42P01' });
    copy.handleError(refused);
    copy.send(Buffer.from('2\n'));
    copy.end();
    copy.handleReadyForQuery();
    await expect(copy.done).rejects.toBe(refused);
    expect(c.sent).toEqual(['Q COPY t FROM STDIN', 'd 1\n']);
  });

  it('fail() sends CopyFail instead of CopyDone', async () => {
    const c = connection();
    const copy = new CopyIn('COPY t FROM STDIN');
    copy.submit(c);
    copy.fail('encoding failed');
    copy.end();
    expect(c.sent).toEqual(['Q COPY t FROM STDIN', 'f encoding failed']);
  });
});
