export type { PostgresAdapterStats, PostgresSinkOptions } from './adapter.js';
export { PostgresAdapter, postgresAdapter, postgresSink } from './adapter.js';
export { classifyPostgresError, classifySqlstate } from './classify.js';
export { quoteIdentifier } from './identifiers.js';
export type {
  ColumnSpec,
  ConflictOptions,
  CopyFormat,
  InsertForm,
  PostgresAdapterOptions,
  PostgresMode,
  StoreOffsetsOptions,
} from './options.js';
export { MAX_PARAMETERS, POSTGRES_DEFAULTS } from './options.js';
