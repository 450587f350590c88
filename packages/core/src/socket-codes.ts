/**
 * Node's error codes for a connection that was refused, lost, timed out or never resolved: the
 * store is unreachable right now, so a write is worth retrying. Source: Node.js documentation,
 * "Errors — Common system errors" (ECONNREFUSED, ECONNRESET, EPIPE, ETIMEDOUT), and getaddrinfo(3)
 * for the DNS codes (EAI_AGAIN, ENOTFOUND); ECONNABORTED, EHOSTUNREACH, EHOSTDOWN, ENETUNREACH and
 * ENETDOWN are errno(3) names.
 */
export const SOCKET_ERROR_CODES: ReadonlySet<string> = new Set([
  'ECONNREFUSED',
  'ECONNRESET',
  'ECONNABORTED',
  'EPIPE',
  'ETIMEDOUT',
  'EHOSTUNREACH',
  'EHOSTDOWN',
  'ENETUNREACH',
  'ENETDOWN',
  'EAI_AGAIN',
  'ENOTFOUND',
]);

/** True for an error (or a code) that means the connection, not the data, is the problem. */
export function isSocketError(errorOrCode: unknown): boolean {
  const code =
    typeof errorOrCode === 'string'
      ? errorOrCode
      : typeof errorOrCode === 'object' && errorOrCode !== null
        ? (errorOrCode as { code?: unknown }).code
        : undefined;
  return typeof code === 'string' && SOCKET_ERROR_CODES.has(code);
}
