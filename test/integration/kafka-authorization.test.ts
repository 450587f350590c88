// Kafka authorization and authentication errors from a real broker, not a stand-in: a private
// KRaft broker with SASL/PLAIN users and ACLs (StandardAuthorizer, nothing allowed without an ACL).
// Error codes: Apache Kafka protocol documentation, "Error Codes" (TOPIC_AUTHORIZATION_FAILED 29,
// GROUP_AUTHORIZATION_FAILED 30); the broker settings: Apache Kafka documentation, "Security"
// (SASL/PLAIN, "Authorization and ACLs").
import { Sink, SinkFailedError, StoreError } from '@spillway/core';
import { DecodeError, KafkaBridge, kafkaProducerAdapter } from '@spillway/kafka';
import {
  AclOperationTypes,
  AclPermissionTypes,
  AclResourceTypes,
  Kafka,
  logLevel,
  ResourcePatternTypes,
} from 'kafkajs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import {
  createTopic,
  type KafkaBroker,
  startPrivateKafka,
  uniqueName,
  uniqueTopic,
  waitFor,
} from '../harness/index.js';

const ADMIN = { username: 'admin', password: 'admin-secret' };
const RIDER = { username: 'rider', password: 'rider-secret' };

let broker: KafkaBroker;
let topic: string;

function client(user: { username: string; password: string }): Kafka {
  return new Kafka({
    clientId: uniqueName('authz'),
    brokers: broker.brokers,
    logLevel: logLevel.NOTHING,
    retry: { retries: 1, initialRetryTime: 100 },
    sasl: { mechanism: 'plain', ...user },
  });
}

/** Lets the rider do `operation` on the test topic (an ACL, made by the admin). */
async function allowRider(operation: AclOperationTypes): Promise<void> {
  const admin = client(ADMIN).admin();
  await admin.connect();
  try {
    await admin.createAcls({
      acl: [
        {
          resourceType: AclResourceTypes.TOPIC,
          resourceName: topic,
          resourcePatternType: ResourcePatternTypes.LITERAL,
          principal: `User:${RIDER.username}`,
          host: '*',
          operation,
          permissionType: AclPermissionTypes.ALLOW,
        },
      ],
    });
  } finally {
    await admin.disconnect();
  }
}

beforeAll(async () => {
  broker = await startPrivateKafka({
    label: 'authz',
    sasl: ADMIN,
    properties: {
      listeners: `SASL_PLAINTEXT://127.0.0.1:{{BROKER_PORT}},CONTROLLER://127.0.0.1:{{CONTROLLER_PORT}}`,
      'advertised.listeners': 'SASL_PLAINTEXT://127.0.0.1:{{BROKER_PORT}}',
      'listener.security.protocol.map': 'CONTROLLER:PLAINTEXT,SASL_PLAINTEXT:SASL_PLAINTEXT',
      'inter.broker.listener.name': 'SASL_PLAINTEXT',
      'sasl.enabled.mechanisms': 'PLAIN',
      'sasl.mechanism.inter.broker.protocol': 'PLAIN',
      'listener.name.sasl_plaintext.plain.sasl.jaas.config': `org.apache.kafka.common.security.plain.PlainLoginModule required username="${ADMIN.username}" password="${ADMIN.password}" user_${ADMIN.username}="${ADMIN.password}" user_${RIDER.username}="${RIDER.password}";`,
      'authorizer.class.name': 'org.apache.kafka.metadata.authorizer.StandardAuthorizer',
      // The controller listener is PLAINTEXT inside this one process: its principal is ANONYMOUS.
      'super.users': `User:${ADMIN.username};User:ANONYMOUS`,
      'allow.everyone.if.no.acl.found': false,
    },
  });
  const admin = client(ADMIN).admin();
  await admin.connect();
  try {
    topic = await createTopic(admin, uniqueTopic('authz'), 1);
  } finally {
    await admin.disconnect();
  }
}, 180_000);

afterAll(async () => {
  await broker?.stop();
});

/** A Tandem Bikes dock event. */
interface DockEvent {
  dock: string;
  bikes: number;
}

function producerSink(kafka: Kafka, idempotent = true) {
  const adapter = kafkaProducerAdapter<DockEvent>({
    kafka,
    topic,
    idempotent,
    mapper: (e) => ({ key: e.dock, value: JSON.stringify(e) }),
    producer: { retry: { retries: 1, initialRetryTime: 100 } },
  });
  return new Sink(adapter, { maxRecords: 10, retry: { maxAttempts: 3, baseDelayMs: 20 } });
}

/** The error a failed sink stopped on. */
async function fatalOf(sink: Sink<DockEvent>): Promise<StoreError> {
  const failed = await sink.flush().then(
    () => undefined,
    (e: unknown) => e,
  );
  expect(failed).toBeInstanceOf(SinkFailedError);
  return (failed as SinkFailedError).cause as StoreError;
}

describe('the Kafka producer sink against a broker with ACLs', () => {
  // An idempotent producer (the default) first asks for a producer id, which needs IDEMPOTENT_WRITE
  // on the cluster or WRITE on some topic (Apache Kafka documentation, "Authorization and ACLs").
  it.each([
    [true, 'CLUSTER_AUTHORIZATION_FAILED'],
    [false, 'TOPIC_AUTHORIZATION_FAILED'],
  ])(
    'idempotent %s: stops on %s for a user without WRITE, and reports nothing durable',
    async (idempotent, code) => {
      const sink = producerSink(client(RIDER), idempotent);
      for (let i = 0; i < 5; i++) await sink.write({ dock: `dock-${i}`, bikes: i });
      const error = await fatalOf(sink);
      expect(error.driverCode).toBe(code);
      expect(sink.snapshot().written).toBe(0);
      await sink.close().catch(() => undefined);
    },
  );

  it('stops on a refused login (wrong password), and reports nothing durable', async () => {
    const sink = producerSink(client({ username: RIDER.username, password: 'not-the-password' }));
    await sink.write({ dock: 'dock-1', bikes: 3 });
    const error = await fatalOf(sink);
    expect(String(error.driverCode)).toMatch(/SASL/);
    expect(sink.snapshot().written).toBe(0);
    await sink.close().catch(() => undefined);
  });

  it('writes once the user is granted WRITE on the topic (the refusal was the ACL)', async () => {
    await allowRider(AclOperationTypes.WRITE);
    // ACLs reach the broker's authorizer through the metadata log, a moment later: a sink stopped
    // by a refusal stays stopped, so each try is a new one.
    const written = await waitFor(
      'the WRITE ACL to apply',
      async () => {
        const sink = producerSink(client(RIDER));
        try {
          for (let i = 0; i < 5; i++) await sink.write({ dock: `dock-${i}`, bikes: i });
          await sink.flush();
          return sink.snapshot().written;
        } catch {
          return undefined;
        } finally {
          await sink.close().catch(() => undefined);
        }
      },
      { timeoutMs: 20_000 },
    );
    expect(written).toBe(5);
  });
});

describe('the consumer bridge against a broker with ACLs', () => {
  it('fails, naming GROUP_AUTHORIZATION_FAILED, when the user may read the topic but not join the group', async () => {
    const groupId = uniqueName('authz-group');
    await allowRider(AclOperationTypes.READ);
    const sink = producerSink(client(ADMIN));
    const errors: Array<{ error: unknown; fatal: boolean }> = [];
    const bridge = new KafkaBridge<DockEvent>({
      kafka: client(RIDER),
      groupId,
      topics: [topic],
      decode: (m) => (m.value ? (JSON.parse(m.value.toString()) as DockEvent) : new DecodeError('empty')),
      route: () => sink,
      deadLetter: { write: async () => {} },
    });
    bridge.on('error', (e) => errors.push(e));
    try {
      const started = await bridge.start().then(
        () => undefined,
        (e: unknown) => e,
      );
      // kafkajs gives up on the group while the bridge starts (or just after): either way the
      // bridge ends failed, with an error that names the group and the missing ACL.
      await waitFor('the bridge to fail', () => (bridge.state === 'failed' ? true : undefined), {
        timeoutMs: 30_000,
      });
      const fatal = errors.find((e) => e.fatal)?.error as StoreError | undefined;
      expect(fatal).toBeInstanceOf(StoreError);
      expect(fatal?.message).toContain(`"${groupId}"`);
      expect(fatal?.message).toContain('GROUP_AUTHORIZATION_FAILED');
      expect(fatal?.driverCode).toBe('KafkaJSGroupCoordinatorNotFound');
      if (started !== undefined) expect(started).toBe(fatal);
    } finally {
      await bridge.stop({ timeoutMs: 5_000 }).catch(() => undefined);
      await sink.close().catch(() => undefined);
    }
  });
});
