/**
 * The option toolkit every resolver uses (the engine's, the adapters', the exporters'): one error
 * type for a bad option, one unknown-key check, and the number checks. Messages name the option,
 * what was expected and what was given: "Expected `maxRecords` to be an integer >= 1, got `0`".
 */

/** A bad option: a `TypeError` with the stable code `SPILLWAY_INVALID_OPTION`. */
export class InvalidOptionError extends TypeError {
  readonly code = 'SPILLWAY_INVALID_OPTION' as const;
  /** The option's name as the user wrote it (`retry.maxAttempts`, `columns[2].type`). */
  readonly option: string;

  constructor(option: string, message: string) {
    super(message);
    this.name = 'TypeError';
    this.option = option;
  }
}

/** The error for a bad option: names the option, what was expected and what was given. */
export function invalidOption(name: string, expected: string, given: unknown): InvalidOptionError {
  return new InvalidOptionError(name, `Expected \`${name}\` to be ${expected}, got \`${show(given)}\``);
}

function show(value: unknown): string {
  if (typeof value === 'string') return JSON.stringify(value);
  if (typeof value === 'function') return 'function';
  if (typeof value === 'bigint') return `${value}n`;
  if (typeof value === 'number') return String(value);
  try {
    return String(JSON.stringify(value) ?? value);
  } catch {
    return String(value);
  }
}

/**
 * Checks that `options` is an object (undefined reads as `{}`) whose keys are all `known`, so a
 * misspelt option is an error, not a silent default. A key set to `undefined` counts as absent.
 * Returns the options as a record to read the values from.
 */
export function knownOptions(
  options: unknown,
  known: Iterable<string>,
  name = 'options',
): Record<string, unknown> {
  if (options === undefined) return {};
  if (typeof options !== 'object' || options === null) throw invalidOption(name, 'an object', options);
  const allowed = known instanceof Set ? (known as ReadonlySet<string>) : new Set(known);
  const o = options as Record<string, unknown>;
  for (const key of Object.keys(o)) {
    if (!allowed.has(key) && o[key] !== undefined) {
      const where = name === 'options' ? key : `${name}.${key}`;
      throw invalidOption(where, `one of the known options (${[...allowed].join(', ')})`, o[key]);
    }
  }
  return o;
}

export interface NumberRule {
  min: number;
  /** `> min` instead of `>= min`. */
  exclusiveMin?: boolean;
  integer?: boolean;
  /** Let `Infinity` through ("no bound"). */
  allowInfinity?: boolean;
}

/** A finite number with bounds; integers when `integer`. Returns `fallback` when undefined. */
export function numberOption(name: string, value: unknown, fallback: number, rule: NumberRule): number {
  if (value === undefined) return fallback;
  const { min, exclusiveMin = false, integer = false, allowInfinity = false } = rule;
  const kind = integer ? 'an integer' : 'a finite number';
  const bound = `${exclusiveMin ? '>' : '>='} ${min}`;
  const ok =
    typeof value === 'number' &&
    !Number.isNaN(value) &&
    (Number.isFinite(value) || (allowInfinity && value === Number.POSITIVE_INFINITY)) &&
    (!integer || Number.isInteger(value) || value === Number.POSITIVE_INFINITY) &&
    (exclusiveMin ? value > min : value >= min);
  if (!ok) throw invalidOption(name, `${kind} ${bound}${allowInfinity ? ' (or Infinity)' : ''}`, value);
  return value as number;
}

/** An integer count >= `min` (default 1), `Infinity` when `allowInfinity`. */
export function countOption(
  name: string,
  value: unknown,
  fallback: number,
  rule: { min?: number; allowInfinity?: boolean } = {},
): number {
  return numberOption(name, value, fallback, {
    min: rule.min ?? 1,
    integer: true,
    allowInfinity: rule.allowInfinity ?? false,
  });
}

/** A finite number > 0 (an integer when `integer`): durations, sizes, rates. */
export function positiveOption(name: string, value: unknown, fallback: number, integer = false): number {
  return numberOption(name, value, fallback, { min: 0, exclusiveMin: true, integer });
}

/** A finite number >= 0. */
export function nonNegativeOption(name: string, value: unknown, fallback: number): number {
  return numberOption(name, value, fallback, { min: 0 });
}

export function booleanOption(name: string, value: unknown, fallback: boolean): boolean {
  if (value === undefined) return fallback;
  if (typeof value !== 'boolean') throw invalidOption(name, 'a boolean', value);
  return value;
}

/** One of a few string values. */
export function choiceOption<C extends string>(
  name: string,
  value: unknown,
  choices: readonly C[],
  fallback: C,
): C {
  if (value === undefined) return fallback;
  if (!choices.includes(value as C)) {
    const list = choices.map((c) => JSON.stringify(c));
    const expected = list.length === 2 ? `${list[0]} or ${list[1]}` : `one of ${list.join(', ')}`;
    throw invalidOption(name, expected, value);
  }
  return value as C;
}

export function functionOption<F>(name: string, value: unknown): F | undefined {
  if (value === undefined) return undefined;
  if (typeof value !== 'function') throw invalidOption(name, 'a function', value);
  return value as F;
}
