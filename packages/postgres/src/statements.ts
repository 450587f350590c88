/**
 * The SQL text the adapter sends. Only identifiers (quoted) and `$n` placeholders ever go into
 * it; values travel as parameters or as COPY data.
 */
import { copyOptions } from './copy-format.js';
import { qualifiedName, quoteIdentifier } from './identifiers.js';
import type { ResolvedPostgresOptions } from './options.js';

export interface Statements {
  /**
   * `INSERT INTO t (cols) VALUES ($1,…),(…)` (plus ON CONFLICT in upsert mode) for `rows` rows;
   * with insertForm `unnest`, `INSERT INTO t (cols) SELECT * FROM unnest($1::type[], …)` for any count.
   */
  values(rows: number): string;
  /** `COPY <target> (cols) FROM STDIN WITH (FORMAT …)`. */
  copy(target: string): string;
  /** Creates the per-transaction staging table of upsert-via-COPY. */
  createStage: string;
  truncateStage: string;
  /** Merges the staging table into the target. */
  mergeStage: string;
  /** Quoted name of the staging table. */
  stage: string;
  /** Quoted, schema-qualified target. */
  target: string;
}

let stageCounter = 0;

/**
 * The placeholder text of every row count, one per width: `($1,$2),($3,$4),…` and where each
 * row's tuple ends. It depends on nothing but the width, so adapters of that many columns share
 * it for the life of the process, and it grows when a larger statement is asked for.
 */
const placeholderTexts = new Map<number, { text: string; ends: number[] }>();

/** `($1,…,$width),(…)` for `rows` rows: a slice of the shared text, built once. */
function placeholders(width: number, rows: number): string {
  let t = placeholderTexts.get(width);
  if (t === undefined) placeholderTexts.set(width, (t = { text: '', ends: [0] }));
  if (t.ends.length <= rows) {
    let text = t.text;
    let n = (t.ends.length - 1) * width + 1;
    for (let r = t.ends.length - 1; r < rows; r++) {
      let tuple = r === 0 ? `($${n++}` : `,($${n++}`;
      for (let c = 1; c < width; c++) tuple += `,$${n++}`;
      text += `${tuple})`;
      t.ends.push(text.length);
    }
    t.text = text;
  }
  return t.text.slice(0, t.ends[rows]);
}

export function buildStatements(o: ResolvedPostgresOptions<unknown>): Statements {
  const target = qualifiedName(o.table, o.schema);
  const cols = o.columns.map((c) => quoteIdentifier(c.name));
  const colList = `(${cols.join(', ')})`;
  const width = cols.length;

  let onConflict = '';
  if (o.conflict) {
    const key = `(${o.conflict.key.map(quoteIdentifier).join(', ')})`;
    onConflict =
      o.conflict.action === 'nothing'
        ? ` ON CONFLICT ${key} DO NOTHING`
        : ` ON CONFLICT ${key} DO UPDATE SET ${o.conflict.update.map((c) => `${quoteIdentifier(c)} = EXCLUDED.${quoteIdentifier(c)}`).join(', ')}`;
  }
  const head = `INSERT INTO ${target} ${colList} VALUES `;

  // Most batches are full-size: keep the text of the last few row counts, so that pg sends the
  // same flat string again instead of joining up a new one of up to 65,535 placeholders.
  const cache = new Map<number, string>();
  const unnestSql = `INSERT INTO ${target} ${colList} SELECT * FROM unnest(${o.columns.map((c, i) => `$${i + 1}::${c.type}[]`).join(', ')})${onConflict}`;
  const values = (rows: number): string => {
    if (o.insertForm === 'unnest') return unnestSql;
    let sql = cache.get(rows);
    if (sql !== undefined) return sql;
    sql = head + placeholders(width, rows) + onConflict;
    if (cache.size >= 4) cache.delete(cache.keys().next().value as number);
    cache.set(rows, sql);
    return sql;
  };

  // Unique per adapter, so that two adapters sharing a connection never meet in pg_temp.
  const stage = quoteIdentifier(`spillway_stage_${process.pid}_${++stageCounter}`);
  const typed = o.columns.every((c) => c.type !== undefined);
  const createStage = typed
    ? `CREATE TEMP TABLE ${stage} (${o.columns.map((c) => `${quoteIdentifier(c.name)} ${c.type}`).join(', ')}) ON COMMIT DROP`
    : `CREATE TEMP TABLE ${stage} ON COMMIT DROP AS SELECT ${cols.join(', ')} FROM ${target} WITH NO DATA`;

  return {
    values,
    copy: (into) => `COPY ${into} ${colList} FROM STDIN WITH ${copyOptions(o.copyFormat)}`,
    createStage,
    truncateStage: `TRUNCATE ${stage}`,
    mergeStage: `INSERT INTO ${target} ${colList} SELECT ${cols.join(', ')} FROM ${stage}${onConflict}`,
    stage,
    target,
  };
}
