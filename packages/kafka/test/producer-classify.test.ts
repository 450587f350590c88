import { StoreError } from '@spillway/core';
import kafkajs from 'kafkajs';
import { describe, expect, it } from 'vitest';
import { classifyKafkaError, kafkaErrorType } from '../src/classify.js';

// The errors are built with kafkajs' own classes and its own broker error table
// (kafkajs 2.2.4, src/errors.js and src/protocol/error.js), the way its producer raises them.
const {
  KafkaJSProtocolError,
  KafkaJSNumberOfRetriesExceeded,
  KafkaJSConnectionError,
  KafkaJSRequestTimeoutError,
} = kafkajs;
// kafkajs' type declarations leave out arguments its constructors take (src/errors.js): the
// NonRetriable error's options with its cause, and the SASL error's message.
const KafkaJSNonRetriableError = kafkajs.KafkaJSNonRetriableError as unknown as new (
  error: Error,
  options: { cause: Error },
) => Error;
const KafkaJSSASLAuthenticationError = kafkajs.KafkaJSSASLAuthenticationError as unknown as new (
  message: string,
) => Error;

function protocol(type: string, retriable: boolean, code = 0): InstanceType<typeof KafkaJSProtocolError> {
  return new KafkaJSProtocolError({ type, code, retriable, message: type } as never);
}

describe('classifyKafkaError', () => {
  it('splits a batch the broker refused for one record (too large, invalid, bad timestamp)', () => {
    // Source: Apache Kafka protocol guide, error codes 10 MESSAGE_TOO_LARGE, 18 RECORD_LIST_TOO_LARGE,
    // 32 INVALID_TIMESTAMP, 87 INVALID_RECORD (all non-retriable).
    for (const type of [
      'MESSAGE_TOO_LARGE',
      'RECORD_LIST_TOO_LARGE',
      'INVALID_RECORD',
      'INVALID_TIMESTAMP',
    ]) {
      const raw = protocol(type, false);
      // kafkajs' retrier bails with the protocol error itself, or wraps it as NonRetriable with cause.
      expect(classifyKafkaError(raw)).toBe('split');
      expect(classifyKafkaError(new KafkaJSNonRetriableError(raw, { cause: raw }))).toBe('split');
    }
  });

  it('stops on authorization, authentication and unknown topics', () => {
    // Source: Apache Kafka protocol guide, error codes 29, 31, 58, and 3 UNKNOWN_TOPIC_OR_PARTITION.
    expect(classifyKafkaError(protocol('TOPIC_AUTHORIZATION_FAILED', false))).toBe('fatal');
    expect(classifyKafkaError(protocol('CLUSTER_AUTHORIZATION_FAILED', false))).toBe('fatal');
    expect(classifyKafkaError(new KafkaJSSASLAuthenticationError('SASL failed'))).toBe('fatal');
    const unknown = protocol('UNKNOWN_TOPIC_OR_PARTITION', true);
    const exhausted = new KafkaJSNumberOfRetriesExceeded(unknown, { retryCount: 5, retryTime: 100 });
    expect(classifyKafkaError(exhausted)).toBe('fatal');
    expect(classifyKafkaError(exhausted, { unknownTopic: 'retry' })).toBe('retry');
  });

  it('retries disconnects, timeouts, leader moves and exhausted kafkajs retries', () => {
    expect(
      classifyKafkaError(
        new KafkaJSConnectionError('Connection error: connect ECONNREFUSED', { code: 'ECONNREFUSED' }),
      ),
    ).toBe('retry');
    expect(
      classifyKafkaError(new KafkaJSRequestTimeoutError('Request Produce(key: 0, version: 7) timed out')),
    ).toBe('retry');
    // Source: Apache Kafka protocol guide, 6 NOT_LEADER_OR_FOLLOWER and 7 REQUEST_TIMED_OUT are retriable.
    const leader = protocol('NOT_LEADER_FOR_PARTITION', true);
    expect(
      classifyKafkaError(new KafkaJSNumberOfRetriesExceeded(leader, { retryCount: 5, retryTime: 100 })),
    ).toBe('retry');
    expect(
      classifyKafkaError(
        new KafkaJSNumberOfRetriesExceeded(new KafkaJSConnectionError('closed'), {
          retryCount: 5,
          retryTime: 1,
        }),
      ),
    ).toBe('retry');
  });

  it('retries the idempotent producer sequence errors kafkajs marks non-retriable', () => {
    for (const type of ['OUT_OF_ORDER_SEQUENCE_NUMBER', 'UNKNOWN_PRODUCER_ID', 'INVALID_PRODUCER_EPOCH']) {
      expect(
        classifyKafkaError(
          new KafkaJSNonRetriableError(protocol(type, false), { cause: protocol(type, false) }),
        ),
      ).toBe('retry');
    }
  });

  it('trusts the retriable flag of a protocol error it has no entry for', () => {
    expect(classifyKafkaError(protocol('SOME_FUTURE_ERROR', true))).toBe('retry');
    expect(classifyKafkaError(protocol('SOME_OTHER_FUTURE_ERROR', false))).toBe('fatal');
  });

  it('treats an error that is not from kafkajs as a bug (fatal)', () => {
    expect(classifyKafkaError(new TypeError('value must be a Buffer'))).toBe('fatal');
    expect(classifyKafkaError('a string')).toBe('fatal');
  });

  it('reads the type through Spillway store errors', () => {
    const raw = protocol('MESSAGE_TOO_LARGE', false);
    const wrapped = new StoreError('produce failed', { cause: raw, driverCode: 'MESSAGE_TOO_LARGE' });
    expect(kafkaErrorType(wrapped)).toBe('MESSAGE_TOO_LARGE');
    expect(classifyKafkaError(wrapped)).toBe('split');
    expect(
      kafkaErrorType(
        new KafkaJSNumberOfRetriesExceeded(new KafkaJSConnectionError('x'), { retryCount: 1, retryTime: 1 }),
      ),
    ).toBe('KafkaJSConnectionError');
  });
});
