/** Resolves as `work` does, or with `onTimeout()`'s value / rejection when `ms` passes first. */
export function within<T>(
  work: Promise<T>,
  ms: number,
  onTimeout: () => Error | undefined,
): Promise<T | undefined> {
  return new Promise<T | undefined>((resolve, reject) => {
    const t = setTimeout(() => {
      const e = onTimeout();
      if (e) reject(e);
      else resolve(undefined);
    }, ms);
    work.then(
      (v) => {
        clearTimeout(t);
        resolve(v);
      },
      (e: unknown) => {
        clearTimeout(t);
        reject(e);
      },
    );
  });
}
