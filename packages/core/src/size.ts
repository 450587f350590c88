/**
 * The default size estimator: a rough count of the bytes a record adds to a write, cheap enough
 * for the hot path (no serialisation). Adapters that know their wire format supply their own.
 */
export function estimateJsonBytes(value: unknown): number {
  // A plain object, the usual record, goes straight to its fields: no type tests on the way.
  if (typeof value === 'object' && value !== null && Object.getPrototypeOf(value) === Object.prototype)
    return fields(value as Record<string, unknown>, 0);
  return estimate(value, 0);
}

function estimate(value: unknown, depth: number): number {
  switch (typeof value) {
    case 'string':
      // UTF-16 length is a lower bound of UTF-8 bytes; good enough for a flush threshold.
      return value.length + 2;
    case 'number':
      return 8;
    case 'bigint':
      return 20;
    case 'boolean':
      return 5;
    case 'undefined':
      return 0;
    case 'object': {
      if (value === null) return 4;
      if (value instanceof Uint8Array) return value.byteLength;
      if (value instanceof Date) return 26;
      if (depth >= 4) return 64;
      let n = 2;
      if (Array.isArray(value)) {
        for (const v of value) n += estimate(v, depth + 1) + 1;
        return n;
      }
      return fields(value as Record<string, unknown>, depth);
    }
    default:
      return 16;
  }
}

function fields(obj: Record<string, unknown>, depth: number): number {
  let n = 2;
  for (const k in obj) {
    const v = obj[k];
    // Numbers and strings inline: most records are flat, and a call per field is a third of
    // the cost of estimating one.
    if (typeof v === 'number') n += k.length + 12;
    else if (typeof v === 'string') n += k.length + 6 + v.length;
    else n += k.length + 4 + estimate(v, depth + 1);
  }
  return n;
}
