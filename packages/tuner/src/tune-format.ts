import type { ShapeName } from './shapes.js';
import type { TuneCandidate, TuneOutcome } from './tune.js';

const num = (n: number, d = 1) => (n >= 1000 ? Math.round(n).toLocaleString('en-US') : n.toFixed(d));

function describe(c: TuneCandidate, shapes: ShapeName[]): string[] {
  const s = c.settings;
  const lines = [`maxRecords ${s.maxRecords}, maxAgeMs ${s.maxAgeMs}, idleMs ${s.idleMs}`];
  for (const shape of shapes) {
    const r = c.results[shape];
    if (!r) {
      lines.push(`  ${shape.padEnd(8)} failed`);
      continue;
    }
    const stuck = r.stuck.records > 0 ? `, ${r.stuck.records} stuck` : '';
    lines.push(
      `  ${shape.padEnd(8)} ${num(r.throughput).padStart(7)} records/s   p50 ${num(r.latencyMs.p50)} ms   p99 ${num(r.latencyWithStuckMs.p99)} ms   ` +
        `${r.batches} batches of ${num(r.meanBatchRecords)} on average   store write p99 ${num(r.flushDurationMs.p99)} ms${stuck}`,
    );
  }
  return lines;
}

/** The tuner's verdict as the CLI prints it. */
export function formatTune(t: TuneOutcome): string {
  const out: string[] = [];
  out.push(
    `Target: p99 accept → durable ≤ ${t.p99Ms} ms on ${t.shapes.join(', ')}; store ${t.store}; ${t.candidates.length} settings tried.`,
  );
  if (t.best) {
    out.push('', `Use:        ${describe(t.best, t.shapes).join('\n')}`);
    if (t.runnerUp) out.push('', `Runner-up:  ${describe(t.runnerUp, t.shapes).join('\n')}`);
    const over = t.candidates.filter((c) => !c.meets).length;
    out.push(
      '',
      `${t.candidates.length - over} of ${t.candidates.length} settings met the target; ranked by throughput on ${t.shapes[0]}, then fewer batches, then lower p99.`,
    );
  } else {
    out.push('', `No setting met p99 ≤ ${t.p99Ms} ms.`);
    const closest = [...t.candidates].sort((a, b) => a.worstP99 - b.worstP99)[0];
    if (t.storeWriteP99Ms >= t.p99Ms) {
      out.push(
        `Why: the store's own write already takes ${num(t.storeWriteP99Ms)} ms at p99 (the fastest write of any trial), so no batching setting can bring a record's p99 under ${t.p99Ms} ms.`,
      );
    } else if (closest) {
      out.push(
        `Why: the store writes in ${num(t.storeWriteP99Ms)} ms at p99, but waiting for a batch plus queueing behind earlier writes at this rate brings the best setting (maxRecords ${closest.settings.maxRecords}, maxAgeMs ${closest.settings.maxAgeMs}) to p99 ${num(closest.worstP99)} ms.`,
      );
    }
    if (closest) out.push('', `Closest:    ${describe(closest, t.shapes).join('\n')}`);
  }
  if (t.failures.length > 0) out.push('', `${t.failures.length} trial(s) failed: ${t.failures[0]}`);
  return out.join('\n');
}
