// `number` columns skip conversion for a decimal that JavaScript writes back as the same text
// (`isPlainDecimal`): such a value goes to COPY as spelled, so the shortcut must never accept a
// text that `String(Number(text))` would write otherwise, nor one the number grammar refuses.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { convert, resolveColumns } from '../src/columns.js';
import { isPlainDecimal, isPlainDecimalAt, isPlainInteger, isPlainIntegerAt } from '../src/csv-line.js';

const [column] = resolveColumns([{ name: 'x', type: 'number' }]);

/** What the shortcut stands for: valid, and written back as the same text. */
function writtenAsSpelled(text: string): boolean {
  const v = convert(column!, text);
  return v.ok && String(v.value) === text;
}

describe('plain decimals', () => {
  it('accepts only decimals that are valid and written back exactly as spelled', () => {
    // Texts built from the characters a decimal is made of, seeded so the run repeats.
    const decimalish = fc
      .array(fc.constantFrom('0', '1', '5', '9', '.', '-', 'e', '+'), { minLength: 1, maxLength: 22 })
      .map((cs) => cs.join(''));
    fc.assert(
      fc.property(decimalish, (text) => !isPlainDecimal(text) || writtenAsSpelled(text)),
      { seed: 17, numRuns: 50_000 },
    );
    // And numbers as JavaScript writes them: any double, and short decimals (most of them plain).
    const short = fc
      .tuple(fc.integer({ min: -1_000_000, max: 1_000_000 }), fc.integer({ min: 0, max: 9 }))
      .map(([n, k]) => n / 10 ** k);
    let plains = 0;
    fc.assert(
      fc.property(fc.oneof(fc.double({ noNaN: true, noDefaultInfinity: true }), short), (x) => {
        const text = String(x);
        if (!isPlainDecimal(text)) return true;
        plains++;
        return writtenAsSpelled(text);
      }),
      { seed: 17, numRuns: 50_000 },
    );
    // The property above held for a good share of accepted texts, not vacuously.
    expect(plains).toBeGreaterThan(10_000);
  });

  it('reads bytes as it reads text: the checks on the bytes of a record agree with those on its fields', () => {
    const numberish = fc
      .array(fc.constantFrom('0', '1', '5', '9', '.', '-', 'e', '+', ' '), { minLength: 0, maxLength: 20 })
      .map((cs) => cs.join(''));
    fc.assert(
      fc.property(numberish, fc.nat(3), (text, pad) => {
        // The text inside a larger buffer, as a field of a record is.
        const b = Buffer.from(`${'x'.repeat(pad)}${text}${'y'.repeat(pad)}`, 'latin1');
        const end = pad + text.length;
        return (
          isPlainDecimalAt(b, pad, end) === isPlainDecimal(text) &&
          isPlainIntegerAt(b, pad, end) === isPlainInteger(text)
        );
      }),
      { seed: 17, numRuns: 50_000 },
    );
  });

  it('takes the common spellings and leaves the others to conversion', () => {
    const plain = ['0', '7', '-7', '0.1', '12.5', '-0.5', '0.000001', '123456789012345', '1234567.8'];
    const other = [
      '-0', // written back as 0
      '1.50', // as 1.5
      '007', // as 7
      '0.0000001', // as 1e-7
      '1e3', // as 1000
      '1234567890123456', // 16 digits: a double does not keep every one
      '.5',
      '5.',
      '+5',
      '',
    ];
    expect(plain.filter((t) => !isPlainDecimal(t))).toEqual([]);
    expect(other.filter((t) => isPlainDecimal(t))).toEqual([]);
    expect(plain.every(writtenAsSpelled)).toBe(true);
  });
});
