/**
 * Reading PostgreSQL and pg errors as retry / split / fatal, by SQLSTATE (PostgreSQL
 * documentation, Appendix A, "PostgreSQL Error Codes") and, for connection failures that carry
 * no SQLSTATE, by the socket's errno code or pg's message.
 */
import { type ErrorClass, SpillwayError } from '@spillway/core';
import { SOCKET_ERROR_CODES } from '@spillway/core/kit';

/** Exact SQLSTATEs whose reading differs from their class's. */
const BY_CODE: Readonly<Record<string, ErrorClass>> = {
  '40001': 'retry', // serialization_failure
  '40P01': 'retry', // deadlock_detected
  '40003': 'retry', // statement_completion_unknown
  '40002': 'split', // transaction_integrity_constraint_violation (a deferred constraint)
  '57P01': 'retry', // admin_shutdown
  '57P02': 'retry', // crash_shutdown
  '57P03': 'retry', // cannot_connect_now (starting up, or shutting down)
  '57P05': 'retry', // idle_session_timeout
  '57014': 'retry', // query_canceled (statement_timeout, pg_cancel_backend)
  '57P04': 'fatal', // database_dropped
  // protocol_violation: sent by the server when a statement binds more than 65,535 parameters
  // (pg wraps the Int16 count). A bug in the statement, never fixed by sending it again.
  '08P01': 'fatal',
  '53400': 'fatal', // configuration_limit_exceeded
  '54000': 'split', // program_limit_exceeded: e.g. an index row too large, caused by one value
  '55P03': 'retry', // lock_not_available (lock_timeout)
  '55006': 'retry', // object_in_use
  '25006': 'retry', // read_only_sql_transaction: a standby, or a primary being failed over
  '21000': 'split', // cardinality_violation: the same key twice in one ON CONFLICT DO UPDATE
  P0001: 'split', // raise_exception: a trigger refused the row
  '58000': 'retry', // system_error
  '58030': 'retry', // io_error
};

/** SQLSTATE classes (first two characters) with one reading for the whole class. */
const BY_CLASS: Readonly<Record<string, ErrorClass>> = {
  '08': 'retry', // connection_exception
  '22': 'split', // data_exception
  '23': 'split', // integrity_constraint_violation
  '53': 'retry', // insufficient_resources (too many connections, disk full, out of memory)
  '28': 'fatal', // invalid_authorization_specification
  '3D': 'fatal', // invalid_catalog_name (unknown database)
  '3F': 'fatal', // invalid_schema_name
  '42': 'fatal', // syntax_error_or_access_rule_violation (42P01 undefined table, 42703 undefined column, 42501 privilege)
  '0A': 'fatal', // feature_not_supported
};

/** pg's own messages for a connection that is gone (these errors carry no code). */
const CONNECTION_MESSAGES =
  /Connection terminated|not queryable|timeout exceeded when trying to connect|Query read timeout|connection timeout|socket hang up|Connection closed/i;

const SQLSTATE = /^[0-9A-Z]{5}$/;

/** The SQLSTATE of a pg DatabaseError, or undefined. */
export function sqlstateOf(error: unknown): string | undefined {
  if (typeof error !== 'object' || error === null) return undefined;
  const code = (error as { code?: unknown }).code;
  if (typeof code !== 'string' || !SQLSTATE.test(code) || SOCKET_ERROR_CODES.has(code)) return undefined;
  return code;
}

/** The reading of one SQLSTATE. Unknown codes are fatal: nothing is retried or dropped blindly. */
export function classifySqlstate(code: string): ErrorClass {
  return BY_CODE[code] ?? BY_CLASS[code.slice(0, 2)] ?? 'fatal';
}

/** True when the error says the connection failed or dropped (so the client must be discarded). */
export function isConnectionError(error: unknown): boolean {
  if (typeof error !== 'object' || error === null) return false;
  const code = (error as { code?: unknown }).code;
  if (typeof code === 'string') {
    if (SOCKET_ERROR_CODES.has(code)) return true;
    if (SQLSTATE.test(code)) {
      // Class 08 and the shutdown codes end the session on the server's side.
      return (
        (code.startsWith('08') && code !== '08P01') ||
        code === '57P01' ||
        code === '57P02' ||
        code === '57P03'
      );
    }
  }
  const message = (error as { message?: unknown }).message;
  return typeof message === 'string' && CONNECTION_MESSAGES.test(message);
}

/**
 * How the engine should treat an error from the PostgreSQL adapter: `retry`, `split` or `fatal`.
 * Reads Spillway errors through to their `cause` (the driver's error).
 */
export function classifyPostgresError(error: unknown): ErrorClass {
  if (error instanceof SpillwayError) {
    if (error.code === 'SPILLWAY_RECORD_REJECTED') return 'split';
    if (error.cause !== undefined) return classifyPostgresError(error.cause);
    return error.driverCode !== undefined && SQLSTATE.test(error.driverCode)
      ? classifySqlstate(error.driverCode)
      : 'fatal';
  }
  const code = sqlstateOf(error);
  if (code !== undefined) return classifySqlstate(code);
  if (isConnectionError(error)) return 'retry';
  return 'fatal';
}
