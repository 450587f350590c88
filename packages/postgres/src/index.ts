export { PostgresAdapter, postgresAdapter, postgresSink } from './adapter.js';
export type { PostgresAdapterStats, PostgresSinkOptions } from './adapter.js';
export type { PostgresAdapterOptions, PostgresMode, CopyFormat, InsertForm, ColumnSpec, ConflictOptions } from './options.js';
export { MAX_PARAMETERS, POSTGRES_DEFAULTS } from './options.js';
export { classifyPostgresError, classifySqlstate } from './classify.js';
export { quoteIdentifier } from './identifiers.js';
