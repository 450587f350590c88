// Small pieces of TypeScript source for the options a tune prints: a record field as an
// expression, a key template as a template literal.
import type { KeyTemplate } from './redis-keys.js';

/** `r.dock_id`, or `r["dock id"]` when the name is not an identifier. */
export function fieldExpr(name: string): string {
  return /^[A-Za-z_$][\w$]*$/.test(name) ? `r.${name}` : `r[${JSON.stringify(name)}]`;
}

/** A record field as text: `String(r.dock_id ?? '')`. */
export function textExpr(name: string): string {
  return `String(${fieldExpr(name)} ?? '')`;
}

/** `tandem:dock:{dock_id}` as `` `tandem:dock:${r.dock_id}` ``. */
export function templateLiteral(t: KeyTemplate): string {
  const lit = (s: string) => s.replace(/[\\`]/g, '\\$&').replace(/\$\{/g, '\\${');
  let out = lit(t.parts[0]!);
  t.fields.forEach((f, i) => {
    out += `\${${textExpr(f)}}${lit(t.parts[i + 1]!)}`;
  });
  return `\`${out}\``;
}

/** An object key: bare when it is an identifier, quoted otherwise. */
export function propName(name: string): string {
  return /^[A-Za-z_$][\w$]*$/.test(name) ? name : JSON.stringify(name);
}
