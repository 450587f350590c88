import { describe, expect, it } from 'vitest';
import { StatementParameters } from '../src/parameters.js';

describe('the parameters of a batch of INSERT statements', () => {
  it('cut rows into statements of at most perStatement rows, row-major, in order', () => {
    const p = new StatementParameters(2, 3, 7);
    for (let r = 0; r < 7; r++) p.add([r, `dock-${r}`]);
    const statements = p.statements();
    expect(statements.map((s) => s.rows)).toEqual([3, 3, 1]);
    expect(statements[2]!.values).toEqual([6, 'dock-6']);
    expect(statements.flatMap((s) => s.values)).toEqual(
      Array.from({ length: 7 }, (_, r) => [r, `dock-${r}`]).flat(),
    );
    expect(p.total).toBe(7);
  });

  it('a row with a value of no SQL meaning throws and leaves nothing behind', () => {
    const p = new StatementParameters(3, 100, 3);
    p.add([1, 'a', null]);
    expect(() => p.add([2, 'b', Symbol('x')])).toThrow(TypeError);
    p.add([3, new Date(0), true]);
    const [only] = p.statements();
    expect(only).toEqual({ rows: 2, values: [1, 'a', null, 3, '1970-01-01T00:00:00.000Z', 'true'] });
    expect(p.total).toBe(2);
  });

  it('fewer rows than expected make a statement of the rows there are; more still fit', () => {
    const fewer = new StatementParameters(2, 10, 5);
    fewer.add([1, 'x']);
    expect(fewer.statements()).toEqual([{ rows: 1, values: [1, 'x'] }]);
    const more = new StatementParameters(2, 10, 1);
    more.add([1, 'x']);
    more.add([2, 'y']);
    expect(more.statements()).toEqual([{ rows: 2, values: [1, 'x', 2, 'y'] }]);
  });

  it('no rows make no statement', () => {
    const p = new StatementParameters(2, 10, 4);
    expect(() => p.add([() => 1, 'x'])).toThrow(TypeError);
    expect(p.statements()).toEqual([]);
  });
});
