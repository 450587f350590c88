import { type PostgresMode, postgresAdapter } from '@spillway/postgres';
import pg from 'pg';
import type { DockStatus } from './records.js';
import { DEFAULT_PG_URL, type OpenedStore, type StoreSpec } from './store-spec.js';

const SCHEMA = 'spillway_bench';
const MODES: readonly PostgresMode[] = ['insert', 'copy', 'upsert'];

const COLUMNS = ['seq', 'dock_id', 'station_id', 'bikes_available', 'docks_free', 'status', 'reported_at'];

/** Opens a fresh `dock_status` table for one cell in the `spillway_bench` schema. */
export async function openPostgres(spec: StoreSpec, cellId: string): Promise<OpenedStore> {
  const mode = (spec.mode ?? 'insert') as PostgresMode;
  if (!MODES.includes(mode))
    throw new TypeError(
      `Expected \`mode\` of the postgres store to be one of ${MODES.join(', ')}, got \`${mode}\``,
    );
  const pool = new pg.Pool({ connectionString: spec.url ?? DEFAULT_PG_URL, max: 4 });
  pool.on('error', () => undefined);
  const table = `dock_status_${cellId.replace(/[^a-z0-9_]/gi, '_').toLowerCase()}`.slice(0, 63);
  const version = (await pool.query<{ server_version: string }>('SHOW server_version')).rows[0]
    ?.server_version;
  await pool.query(`CREATE SCHEMA IF NOT EXISTS ${SCHEMA}`).catch(() => undefined); // a parallel cell may race the create
  await pool.query(`DROP TABLE IF EXISTS ${SCHEMA}.${table}`);
  // upsert keeps the latest status per dock, the shape of the Tandem Bikes status table.
  const key = mode === 'upsert' ? 'dock_id integer PRIMARY KEY' : 'dock_id integer NOT NULL';
  await pool.query(
    `CREATE UNLOGGED TABLE ${SCHEMA}.${table} (seq bigint NOT NULL, ${key}, station_id text NOT NULL, ` +
      'bikes_available integer NOT NULL, docks_free integer NOT NULL, status text NOT NULL, reported_at bigint NOT NULL)',
  );
  const adapter = postgresAdapter<DockStatus>({
    pool,
    schema: SCHEMA,
    table,
    columns: COLUMNS,
    mode,
    ...(mode === 'upsert' ? { conflict: { key: ['dock_id'], action: 'update' as const } } : {}),
    map: (r) => [r.seq, r.dockId, r.stationId, r.bikesAvailable, r.docksFree, r.status, r.reportedAt],
  });
  return {
    adapter,
    ...(version === undefined ? {} : { version: `PostgreSQL ${version}` }),
    async dispose() {
      await pool.query(`DROP TABLE IF EXISTS ${SCHEMA}.${table}`).catch(() => undefined);
      await pool.end();
    },
  };
}
