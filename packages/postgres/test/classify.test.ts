import { SpillwayError, StoreError } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { classifyPostgresError, classifySqlstate } from '../src/classify.js';

/** A stand-in for pg's DatabaseError: what the classifier reads is `code` (the SQLSTATE). */
const dbError = (code: string) =>
  Object.assign(new Error(`server said ${code}`), { code, severity: 'ERROR' });

describe('classifySqlstate', () => {
  // Source: PostgreSQL documentation, Appendix A "PostgreSQL Error Codes" (names of the codes);
  // the reading (retry / split / fatal) is the README's table.
  it.each([
    ['40001', 'retry'], // serialization_failure
    ['40P01', 'retry'], // deadlock_detected
    ['57P01', 'retry'], // admin_shutdown
    ['57P02', 'retry'], // crash_shutdown
    ['57P03', 'retry'], // cannot_connect_now
    ['08000', 'retry'], // connection_exception
    ['08003', 'retry'], // connection_does_not_exist
    ['08006', 'retry'], // connection_failure
    ['08001', 'retry'], // sqlclient_unable_to_establish_sqlconnection
    ['08004', 'retry'], // sqlserver_rejected_establishment_of_sqlconnection
    ['22001', 'split'], // string_data_right_truncation
    ['22003', 'split'], // numeric_value_out_of_range
    ['22021', 'split'], // character_not_in_repertoire (a NUL in text)
    ['22P02', 'split'], // invalid_text_representation
    ['22P05', 'split'], // untranslatable_character
    ['23502', 'split'], // not_null_violation
    ['23503', 'split'], // foreign_key_violation
    ['23505', 'split'], // unique_violation
    ['23514', 'split'], // check_violation
    ['42P01', 'fatal'], // undefined_table
    ['42703', 'fatal'], // undefined_column
    ['28000', 'fatal'], // invalid_authorization_specification
    ['28P01', 'fatal'], // invalid_password
    ['3D000', 'fatal'], // invalid_catalog_name
  ] as const)('reads SQLSTATE %s as %s', (code, expected) => {
    expect(classifySqlstate(code)).toBe(expected);
  });

  it('never retries 08P01, the answer to a statement that binds more than 65,535 parameters', () => {
    expect(classifySqlstate('08P01')).toBe('fatal');
  });

  it('treats an unknown SQLSTATE as fatal rather than guessing', () => {
    expect(classifySqlstate('XX000')).toBe('fatal');
    expect(classifySqlstate('ZZ999')).toBe('fatal');
  });
});

describe('classifyPostgresError', () => {
  it('reads the SQLSTATE of a driver error', () => {
    expect(classifyPostgresError(dbError('40P01'))).toBe('retry');
    expect(classifyPostgresError(dbError('23514'))).toBe('split');
    expect(classifyPostgresError(dbError('42P01'))).toBe('fatal');
  });

  it('retries socket failures that carry an errno code instead of a SQLSTATE', () => {
    for (const code of ['ECONNRESET', 'ECONNREFUSED', 'EPIPE', 'ETIMEDOUT']) {
      expect(classifyPostgresError(Object.assign(new Error(`connect ${code}`), { code }))).toBe('retry');
    }
  });

  it("retries pg's uncoded messages for a dropped connection", () => {
    expect(classifyPostgresError(new Error('Connection terminated unexpectedly'))).toBe('retry');
    expect(
      classifyPostgresError(new Error('Client has encountered a connection error and is not queryable')),
    ).toBe('retry');
    expect(classifyPostgresError(new Error('timeout exceeded when trying to connect'))).toBe('retry');
  });

  it('reads through a StoreError to the driver error kept as its cause', () => {
    const wrapped = new StoreError('refused', { cause: dbError('23505'), driverCode: '23505' });
    expect(classifyPostgresError(wrapped)).toBe('split');
    const lost = new StoreError('lost', { cause: new Error('Connection terminated unexpectedly') });
    expect(classifyPostgresError(lost)).toBe('retry');
  });

  it('splits records that the mapper refused', () => {
    expect(classifyPostgresError(new SpillwayError('SPILLWAY_RECORD_REJECTED', 'bad record'))).toBe('split');
  });

  it('treats a programming error with no code as fatal', () => {
    expect(classifyPostgresError(new TypeError('x is not a function'))).toBe('fatal');
    expect(classifyPostgresError('a string')).toBe('fatal');
  });
});
