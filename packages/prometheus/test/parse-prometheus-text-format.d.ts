// The package ships no type declarations; the tests read its output through their own `Parsed`.
declare module 'parse-prometheus-text-format' {
  export default function parsePrometheusTextFormat(text: string): unknown[];
}
