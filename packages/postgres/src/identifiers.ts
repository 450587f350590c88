/** Quoting of SQL identifiers: every table and column name the adapter puts into SQL text. */

/**
 * A quoted identifier (PostgreSQL documentation, Lexical Structure, "Identifiers and Key
 * Words"): wrapped in double quotes with inner double quotes doubled, so any name (quotes,
 * semicolons, spaces, mixed case) is taken literally and cannot end the identifier early.
 */
export function quoteIdentifier(name: string): string {
  return `"${name.replace(/"/g, '""')}"`;
}

/** `"schema"."table"`, or `"table"` when no schema is given. */
export function qualifiedName(table: string, schema: string | undefined): string {
  return schema === undefined
    ? quoteIdentifier(table)
    : `${quoteIdentifier(schema)}.${quoteIdentifier(table)}`;
}
