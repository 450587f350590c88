/**
 * Backoff delay with "full jitter": uniform in [0, min(cap, base · 2^attempt)], where `attempt`
 * counts retries from 0. Spreading delays over the whole interval keeps many clients that failed
 * together from retrying together.
 */
export function fullJitterDelay(
  retry: number,
  baseMs: number,
  capMs: number,
  random: () => number = Math.random,
): number {
  const ceiling = Math.min(capMs, baseMs * 2 ** retry);
  return random() * ceiling;
}
