/**
 * Reading kafkajs errors as retry / split / fatal. kafkajs wraps the broker's error in its own
 * retrier's errors (`KafkaJSNumberOfRetriesExceeded`, `KafkaJSNonRetriableError`) with the
 * original on `cause`, so the chain is walked and the most specific reading wins: the broker's
 * protocol `type` first, then the kafkajs class name, then its `retriable` flag.
 */
import { type ErrorClass, SpillwayError, StoreError } from '@spillway/core';
import { isSocketError } from '@spillway/core/kit';

/** Broker error types that mean one record (or the request built from it) is bad. */
const RECORD_ERRORS: ReadonlySet<string> = new Set([
  'MESSAGE_TOO_LARGE',
  'RECORD_LIST_TOO_LARGE',
  'INVALID_RECORD',
  'INVALID_TIMESTAMP',
]);

/** Broker error types that no retry can fix: authorization, authentication, misconfiguration. */
const FATAL_ERRORS: ReadonlySet<string> = new Set([
  'TOPIC_AUTHORIZATION_FAILED',
  'GROUP_AUTHORIZATION_FAILED',
  'CLUSTER_AUTHORIZATION_FAILED',
  'TRANSACTIONAL_ID_AUTHORIZATION_FAILED',
  'DELEGATION_TOKEN_AUTHORIZATION_FAILED',
  'SASL_AUTHENTICATION_FAILED',
  'UNSUPPORTED_SASL_MECHANISM',
  'ILLEGAL_SASL_STATE',
  'INVALID_REQUIRED_ACKS',
  'UNSUPPORTED_VERSION',
  'UNSUPPORTED_FOR_MESSAGE_FORMAT',
  'UNSUPPORTED_COMPRESSION_TYPE',
  'INVALID_TOPIC_EXCEPTION',
  'INVALID_CONFIG',
  'POLICY_VIOLATION',
]);

/**
 * Broker error types kafkajs marks non-retriable that are transient for a sink: the idempotent
 * producer's sequence state went out of step (the producer sink recreates its producer and the
 * batch is written again), or a consumer group is mid-rebalance.
 */
const TRANSIENT_NON_RETRIABLE: ReadonlySet<string> = new Set([
  'OUT_OF_ORDER_SEQUENCE_NUMBER',
  'DUPLICATE_SEQUENCE_NUMBER',
  'INVALID_PRODUCER_EPOCH',
  'UNKNOWN_PRODUCER_ID',
  'PRODUCER_FENCED',
  'REBALANCE_IN_PROGRESS',
  'ILLEGAL_GENERATION',
  'UNKNOWN_MEMBER_ID',
  'NOT_COORDINATOR_FOR_GROUP',
  'COORDINATOR_NOT_AVAILABLE',
  'COORDINATOR_LOAD_IN_PROGRESS',
  'CONCURRENT_TRANSACTIONS',
  'THROTTLING_QUOTA_EXCEEDED',
]);

/** kafkajs error classes that mean the connection, a broker or the metadata is not there now. */
const TRANSIENT_NAMES: ReadonlySet<string> = new Set([
  'KafkaJSConnectionError',
  'KafkaJSConnectionClosedError',
  'KafkaJSRequestTimeoutError',
  'KafkaJSBrokerNotFound',
  'KafkaJSNoBrokerAvailableError',
  'KafkaJSMetadataNotLoaded',
  'KafkaJSTopicMetadataNotLoaded',
  'KafkaJSStaleTopicMetadataAssignment',
  'KafkaJSLockTimeout',
  'KafkaJSTimeout',
  'KafkaJSGroupCoordinatorNotFound',
]);

/** kafkajs error classes that mean the client or the broker cannot do this at all. */
const FATAL_NAMES: ReadonlySet<string> = new Set([
  'KafkaJSSASLAuthenticationError',
  'KafkaJSServerDoesNotSupportApiKey',
  'KafkaJSNotImplemented',
  'KafkaJSInvariantViolation',
  'KafkaJSUnsupportedMagicByteInMessageSet',
]);

export interface KafkaClassifyOptions {
  /**
   * How to read UNKNOWN_TOPIC_OR_PARTITION once kafkajs has given up on it. With topic
   * auto-creation off (the safe broker setting) a missing topic will not appear by waiting:
   * `fatal`. Use `retry` when topics are created by someone else shortly after the sink starts.
   * @default 'fatal'
   * @example { unknownTopic: 'retry' }
   */
  unknownTopic?: 'fatal' | 'retry';
}

/** The errors in an error's `cause` chain, outermost first (at most 8, and no cycles). */
function chainOf(error: unknown): unknown[] {
  const chain: unknown[] = [];
  let e: unknown = error;
  while (e !== undefined && e !== null && chain.length < 8 && !chain.includes(e)) {
    chain.push(e);
    e = typeof e === 'object' ? (e as { cause?: unknown }).cause : undefined;
  }
  return chain;
}

function field(error: unknown, name: string): unknown {
  return typeof error === 'object' && error !== null ? (error as Record<string, unknown>)[name] : undefined;
}

/**
 * The broker's error type (e.g. `MESSAGE_TOO_LARGE`) anywhere in the cause chain, else the
 * innermost kafkajs error class name (e.g. `KafkaJSConnectionError`), else undefined. Spillway
 * errors contribute their `driverCode`.
 */
export function kafkaErrorType(error: unknown): string | undefined {
  const chain = chainOf(error);
  for (const e of chain) {
    const type = field(e, 'type');
    if (typeof type === 'string' && /^[A-Z_]+$/.test(type)) return type;
    if (e instanceof SpillwayError && e.driverCode !== undefined && /^[A-Z_]+$/.test(e.driverCode))
      return e.driverCode;
  }
  for (let i = chain.length - 1; i >= 0; i--) {
    const name = field(chain[i], 'name');
    if (typeof name === 'string' && name.startsWith('KafkaJS')) return name;
  }
  return undefined;
}

/**
 * Classifies a kafkajs error for a sink:
 * - `split`: the broker refused a record (MESSAGE_TOO_LARGE, RECORD_LIST_TOO_LARGE, INVALID_RECORD,
 *   INVALID_TIMESTAMP) — the batch is bisected until the bad record stands alone, then dead-lettered;
 * - `fatal`: authorization / authentication / misconfiguration, an unknown topic (see
 *   `unknownTopic`), or an error that is not from kafkajs at all (a bug);
 * - `retry`: everything transient — disconnects, timeouts, leader moves, the idempotent producer's
 *   sequence errors, rebalances, and any protocol error the broker marks retriable.
 */
export function classifyKafkaError(error: unknown, options: KafkaClassifyOptions = {}): ErrorClass {
  const chain = chainOf(error);
  const type = kafkaErrorType(error);
  if (type !== undefined) {
    if (RECORD_ERRORS.has(type)) return 'split';
    if (FATAL_ERRORS.has(type) || FATAL_NAMES.has(type)) return 'fatal';
    if (type === 'UNKNOWN_TOPIC_OR_PARTITION') return options.unknownTopic ?? 'fatal';
    if (TRANSIENT_NON_RETRIABLE.has(type) || TRANSIENT_NAMES.has(type)) return 'retry';
  }
  for (const e of chain) {
    const name = field(e, 'name');
    if (typeof name === 'string' && (FATAL_NAMES.has(name) || name === 'KafkaJSSASLAuthenticationError'))
      return 'fatal';
    if (typeof name === 'string' && TRANSIENT_NAMES.has(name)) return 'retry';
    if (isSocketError(field(e, 'code'))) return 'retry';
  }
  // A protocol error we have no entry for: trust the broker's own retriable flag.
  for (let i = chain.length - 1; i >= 0; i--) {
    const e = chain[i];
    if (typeof field(e, 'type') === 'string' && typeof field(e, 'retriable') === 'boolean') {
      return field(e, 'retriable') === true ? 'retry' : 'fatal';
    }
  }
  // kafkajs' retrier gives up with KafkaJSNumberOfRetriesExceeded on transient errors only.
  if (chain.some((e) => field(e, 'name') === 'KafkaJSNumberOfRetriesExceeded')) return 'retry';
  const outer = chain[0];
  if (typeof field(outer, 'name') === 'string' && String(field(outer, 'name')).startsWith('KafkaJS')) {
    return field(outer, 'retriable') === false ? 'fatal' : 'retry';
  }
  return 'fatal';
}

/**
 * The error a consumer crash fails the bridge with. kafkajs turns a FindCoordinator refusal into
 * "Failed to find group coordinator" without the broker's error; against a broker with ACLs that
 * is what a principal without READ on the group gets (seen in this repository's authorization
 * test), so the message says where to look.
 */
export function explainCrash(error: unknown, groupId: string): unknown {
  if ((error as { name?: unknown } | undefined)?.name !== 'KafkaJSGroupCoordinatorNotFound') return error;
  return new StoreError(
    `No coordinator found for consumer group "${groupId}". kafkajs reports this when FindCoordinator fails for good: with ACLs, when the principal lacks READ on the group (GROUP_AUTHORIZATION_FAILED); otherwise when no broker can act as coordinator.`,
    { cause: error, driverCode: 'KafkaJSGroupCoordinatorNotFound', details: { groupId } },
  );
}
