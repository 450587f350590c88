/**
 * The Standard Schema interface (standardschema.dev, v1), declared here so any validator that
 * implements it (zod 4, valibot, arktype, …) works without Spillway depending on one.
 */
export interface StandardSchemaV1<Input = unknown, Output = Input> {
  readonly '~standard': {
    readonly version: 1;
    readonly vendor: string;
    readonly validate: (value: unknown) => StandardResult<Output> | Promise<StandardResult<Output>>;
    readonly types?: { readonly input: Input; readonly output: Output } | undefined;
  };
}

export type StandardResult<Output> =
  | { readonly value: Output; readonly issues?: undefined }
  | { readonly issues: ReadonlyArray<StandardIssue> };

export interface StandardIssue {
  readonly message: string;
  readonly path?: ReadonlyArray<PropertyKey | { readonly key: PropertyKey }> | undefined;
}

export function isStandardSchema(value: unknown): value is StandardSchemaV1 {
  if ((typeof value !== 'object' && typeof value !== 'function') || value === null) return false;
  const std = (value as { '~standard'?: { version?: unknown; validate?: unknown } })['~standard'];
  return typeof std === 'object' && std !== null && std.version === 1 && typeof std.validate === 'function';
}

/** The dotted path of an issue (`parts.0.sku`), or undefined for an issue about the whole row. */
export function issuePath(issue: StandardIssue): string | undefined {
  if (!issue.path || issue.path.length === 0) return undefined;
  return issue.path
    .map((p) => String(typeof p === 'object' && p !== null && 'key' in p ? p.key : p))
    .join('.');
}
