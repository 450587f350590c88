// The error a tune throws when it cannot connect to the user's server at the start: SPILLWAY_STORE_ERROR
// naming the server (credentials left out) and the driver's reason, the driver's error as cause.
import { StoreError } from '@spillway/core';

/** `postgres://***@host/db`: the user name and password of a URL are not printed. */
export const redactUrl = (url: string) => url.replace(/\/\/[^@/]*@/, '//***@');

export function cannotConnect(what: string, error: unknown): StoreError {
  // kafkajs wraps the connection error in its retry error; the reason is in the innermost cause.
  let reason: unknown = error;
  while (reason instanceof Error && reason.cause instanceof Error) reason = reason.cause;
  const code = (reason as { code?: unknown } | undefined)?.code;
  return new StoreError(
    `Cannot connect to ${what}: ${reason instanceof Error ? reason.message : String(reason)}`,
    {
      cause: error,
      ...(typeof code === 'string' ? { driverCode: code } : {}),
      details: { server: what },
    },
  );
}
