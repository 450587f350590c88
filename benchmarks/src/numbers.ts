/** Median, extremes and spread ((max − min) / median, in %) of repeated samples. */
export function summary(xs: number[]): { median: number; min: number; max: number; spreadPct: number } {
  const s = [...xs].sort((a, b) => a - b);
  const mid = s.length >> 1;
  const median = s.length % 2 ? s[mid]! : (s[mid - 1]! + s[mid]!) / 2;
  return {
    median,
    min: s[0]!,
    max: s[s.length - 1]!,
    spreadPct: ((s[s.length - 1]! - s[0]!) / median) * 100,
  };
}

/** A count or rate for a report line: rounded, with thousands separators. */
export const fmt = (n: number): string => Math.round(n).toLocaleString('en-US');
