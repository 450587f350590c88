// What a table tune prints: the setup, the table of trials, the recommendation with its
// validation, and a paste-ready options object; and the chart of p99 against store cost. The
// parts after the setup are the same for a Redis or Kafka tune, which print them from here.
import type { Settings } from './cell-spec.js';
import { scatterSvg } from './chart-svg.js';
import type { SearchOutcome } from './search.js';
import { byCost, type RankedTrial } from './table-search.js';
import type { TableTuneOutcome } from './tune-table.js';

export const n0 = (v: number) => Math.round(v).toLocaleString('en-US');
const us = (ms: number) => (ms * 1000).toFixed(1);

/** `maxRecords 500, maxAgeMs 25, idleMs 25, concurrency 1` */
export function settingsText(t: { settings: Settings }): string {
  const s = t.settings;
  return `maxRecords ${s.maxRecords}, maxAgeMs ${s.maxAgeMs}, idleMs ${s.idleMs}, concurrency ${s.concurrency}`;
}

const short = (t: RankedTrial) => {
  const s = t.settings;
  return `${s.maxRecords}/${s.maxAgeMs}/${s.idleMs}/c${s.concurrency}`;
};

/** The table of trials, cheapest store cost first. */
export function trialsTable(o: SearchOutcome): string {
  const head = [
    'maxRecords',
    'maxAgeMs',
    'idleMs',
    'concurrency',
    'p99 ms',
    'records/s',
    'writes/s',
    'store µs/record',
    'ceiling/s (est.)',
    'meets',
  ];
  const rows = [...o.trials]
    .sort(byCost)
    .map((t) => [
      String(t.settings.maxRecords),
      String(t.settings.maxAgeMs),
      String(t.settings.idleMs),
      String(t.settings.concurrency),
      t.p99Ms.toFixed(1),
      n0(t.throughput),
      n0(t.writesPerSecond),
      us(t.storeMsPerRecord),
      n0(t.ceiling),
      t.meets ? (t === o.recommended ? 'yes ◀' : 'yes') : `no: ${t.why[0] ?? ''}`,
    ]);
  const widths = head.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i]!.length)));
  const line = (r: string[]) =>
    `| ${r.map((c, i) => (i === r.length - 1 ? c.padEnd(widths[i]!) : c.padStart(widths[i]!))).join(' | ')} |`;
  return [line(head), `|${widths.map((w) => '-'.repeat(w + 2)).join('|')}|`, ...rows.map(line)].join('\n');
}

/** The sink options to paste: a postgresSink call with the table, columns, mode and the recommended setting. */
export function optionsSnippet(o: TableTuneOutcome): string {
  const best = o.recommended;
  if (!best) return '';
  const s = best.settings;
  const [schema, ...rest] = o.table.split('.');
  const table = rest.join('.');
  const cols = o.records.columns;
  const lines = [
    "import { postgresSink } from '@spillway/postgres';",
    '',
    `// Tuned for p99 ≤ ${o.target.p99Ms} ms at ${n0(o.load.rate)} records/s (${o.load.shape}), ${o.mode} mode.`,
    `// The pool needs at least ${s.concurrency} connection(s): one per batch in flight.`,
    'const sink = postgresSink<Record<string, unknown>>({',
    '  pool,',
    `  schema: ${JSON.stringify(schema)},`,
    `  table: ${JSON.stringify(table)},`,
    `  columns: ${JSON.stringify(cols)},`,
    `  mode: '${o.mode}',`,
    ...(o.key ? [`  conflict: { key: ${JSON.stringify(o.key)} },`] : []),
    `  map: (r) => [${cols.map((c) => (/^[A-Za-z_$][\w$]*$/.test(c) ? `r.${c}` : `r[${JSON.stringify(c)}]`)).join(', ')}],`,
    `  maxRecords: ${s.maxRecords},`,
    `  maxAgeMs: ${s.maxAgeMs},`,
    `  idleMs: ${s.idleMs},`,
    `  concurrency: ${s.concurrency},`,
    '});',
  ];
  return lines.join('\n');
}

/** The whole report as the command prints it. */
export function formatTableTune(o: TableTuneOutcome): string {
  const out: string[] = [];
  out.push(
    `Table ${o.table} on ${o.server}, ${o.mode} mode${o.key ? ` (key ${o.key.join(', ')})` : ''}.`,
    `Measured on a scratch copy ${o.scratch} (CREATE TABLE … (LIKE ${o.table} INCLUDING ALL): same columns, indexes, constraints and defaults, logged), dropped afterwards.`,
  );
  if (o.reseeded.length > 0)
    out.push(
      `Serial column(s) ${o.reseeded.join(', ')} draw from a sequence of the copy's own, not from yours.`,
    );
  if (o.lacks.length > 0) out.push('The copy lacks:', ...o.lacks.map((l) => `  - ${l}`));
  else out.push('The copy lacks nothing the catalogs show (no foreign keys, no triggers, no existing rows).');
  if (o.prefilled > 0) out.push(`The copy was prefilled with ${n0(o.prefilled)} rows before measuring.`);
  const r = o.records;
  out.push(
    r.generated
      ? `Records: ${n0(r.rows)} rows generated from the column types (no --sample), cycled; columns ${r.columns.join(', ')}.`
      : `Records: ${n0(r.rows)} rows of ${r.source}, cycled; columns ${r.columns.join(', ')}.`,
  );
  if (r.ignored.length > 0)
    out.push(`  Sample fields not in the table (not written): ${r.ignored.join(', ')}.`);
  if (r.defaulted.length > 0) out.push(`  Left to their defaults: ${r.defaulted.join(', ')}.`);
  if (r.varied.length > 0)
    out.push(
      `  Unique column(s) changed on each pass so that passes do not collide: ${r.varied.map((v) => v.name).join(', ')}.`,
    );
  if (r.repeating.length > 0)
    out.push(`  Unique column(s) that repeat after one pass (expect refusals): ${r.repeating.join(', ')}.`);
  out.push(...searchReport(o, 'on the copy', optionsSnippet(o)));
  return out.join('\n');
}

/**
 * The report after the setup lines: load and target, the fitted write cost, the trials, the
 * recommendation with its validation runs and the options to paste. `where` says where the
 * validation ran ("on the copy", "on the scratch keys").
 */
export function searchReport(o: SearchOutcome, where: string, snippet: string): string[] {
  const out: string[] = [];
  out.push(
    `Load: ${o.load.shape} at ${n0(o.load.rate)} records/s, ${o.load.trialMs} ms per trial. Target: p99 accept → durable ≤ ${o.target.p99Ms} ms; with ${Math.round(o.target.headroom * 100)} % headroom a setting must reach ≤ ${o.target.aimMs} ms.`,
    `Store write cost fitted over ${n0(o.writeCost.writes)} writes: ${o.writeCost.fixedMs.toFixed(2)} ms + ${us(o.writeCost.perRecordMs)} µs per record.`,
    '',
    trialsTable(o),
    '',
    'store µs/record: time the store spent writing, per record written (the store cost). ceiling/s: estimated highest rate the setting sustains — full batches back to back on its connections at the fitted write cost (an upper bound).',
    '',
  );
  const best = o.recommended;
  if (best) {
    out.push(
      `Recommended: ${settingsText(best)}`,
      `  p99 ${best.p99Ms.toFixed(1)} ms (aim ≤ ${o.target.aimMs} ms), ${n0(best.throughput)} records/s, ${n0(best.writesPerSecond)} writes/s, ${us(best.storeMsPerRecord)} µs of store time per record, estimated ceiling ${n0(best.ceiling)} records/s.`,
    );
    for (const v of o.validations ?? []) {
      const t = v.trial;
      const s = t.settings;
      out.push(
        '',
        `Validation: ${(v.durationMs / 1000).toFixed(0)} s at ${n0(o.load.rate)} records/s ${where}, maxRecords ${s.maxRecords}, maxAgeMs ${s.maxAgeMs}, idleMs ${s.idleMs}, concurrency ${s.concurrency} — ${v.holds ? 'the advice holds' : `did NOT hold: ${v.why.join('; ')}`}.`,
        `  p99 ${t.p99Ms.toFixed(1)} ms (target ${o.target.p99Ms} ms) · ${n0(t.throughput)} records/s durable (offered ${n0(t.offeredRate)}) · ${t.stuck} stuck · ${t.deadLettered} refused · ${us(t.storeMsPerRecord)} µs store time per record`,
      );
    }
    const first = o.validations?.[0];
    if (first && !first.holds && o.validation?.holds)
      out.push(
        '',
        `The cheapest setting that met the aim (${settingsText(first.trial)}) missed the target in its validation run; the recommendation is the next cheapest with a lower p99, which held.`,
      );
    out.push('', 'Options to paste:', '', snippet);
  } else {
    out.push(
      `No setting met p99 ≤ ${o.target.aimMs} ms (the target less the headroom) at ${n0(o.load.rate)} records/s.`,
    );
    const closest = [...o.trials].sort((a, b) => a.p99Ms - b.p99Ms)[0];
    if (closest) out.push(`Closest: ${settingsText(closest)} — ${closest.why.join('; ')}.`);
    const floor = Math.min(...o.trials.map((t) => t.writeP99Ms));
    if (floor >= o.target.aimMs)
      out.push(
        `Why: one store write already takes ${floor.toFixed(1)} ms at p99, so no batching setting can reach the aim.`,
      );
  }
  return out;
}

/** The chart of p99 against store cost over the settings tried. */
export function tableChart(o: TableTuneOutcome): string {
  return searchChart(o, `${o.table}, ${o.mode}`);
}

/** The chart of p99 against store cost over the settings of any tune; `what` starts the title. */
export function searchChart(o: SearchOutcome, what: string): string {
  return scatterSvg({
    title: `${what}, ${o.load.shape} at ${n0(o.load.rate)}/s: p99 against store cost`,
    xLabel: 'store time per record, µs',
    yLabel: 'p99 accept → durable, ms',
    points: o.trials.map((t) => ({
      x: t.storeMsPerRecord * 1000,
      y: t.p99Ms,
      label: short(t),
      highlight: t === o.recommended,
      fails: !t.meets,
    })),
    lines: [
      { y: o.target.p99Ms, label: `target ${o.target.p99Ms} ms` },
      { y: o.target.aimMs, label: `aim ${o.target.aimMs} ms` },
    ],
  }).svg;
}
