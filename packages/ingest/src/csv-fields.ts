/**
 * Splits well-formed CSV records into fields. Every record given here has passed the framer
 * (`csv-framer.ts`): its quotes are balanced, a closing quote is followed by the delimiter or the
 * end of the record, and its line break is gone. So the splitter needs no error handling, and a
 * record without a quote — most of a real file — is one native `split`.
 *
 * Chosen by measurement (benchmarks/README.md, "Ingest"): on the same framed records it parsed
 * 4–5× the rows per second of csv-parse, which it replaced. d3-dsv was faster still but ends a
 * record at a lone CR, which the reading rules keep as data in an unquoted field; papaparse was
 * slower than this; udsv infers a fixed column count from a sample, and ragged rows must be seen.
 */

const QUOTE = 0x22;
const LF = 0x0a;

/** The fields of each record in `text`: records joined by LF, each well formed. */
export function splitRecords(text: string, delimiter: number): string[][] {
  const d = String.fromCharCode(delimiter);
  const rows: string[][] = [];
  const n = text.length;
  let nextQuote = text.indexOf('"');
  if (nextQuote < 0) nextQuote = n;
  let i = 0;
  while (i < n) {
    let eol = text.indexOf('\n', i);
    if (eol < 0) eol = n;
    if (nextQuote < i) {
      nextQuote = text.indexOf('"', i);
      if (nextQuote < 0) nextQuote = n;
    }
    if (nextQuote > eol) {
      rows.push(text.slice(i, eol).split(d));
      i = eol + 1;
      continue;
    }
    // A record with a quoted field (which may hold line breaks): field by field.
    const fields: string[] = [];
    for (;;) {
      if (text.charCodeAt(i) === QUOTE) {
        let value = '';
        let from = i + 1;
        for (;;) {
          const q = text.indexOf('"', from);
          if (text.charCodeAt(q + 1) === QUOTE) {
            value += text.slice(from, q + 1);
            from = q + 2;
            continue;
          }
          value += text.slice(from, q);
          i = q + 1;
          break;
        }
        fields.push(value);
      } else {
        let j = i;
        while (j < n) {
          const c = text.charCodeAt(j);
          if (c === delimiter || c === LF) break;
          j++;
        }
        fields.push(text.slice(i, j));
        i = j;
      }
      if (text.charCodeAt(i) === delimiter) i++;
      else {
        i++; // the LF that ends the record (or the end of the text)
        break;
      }
    }
    rows.push(fields);
  }
  return rows;
}
