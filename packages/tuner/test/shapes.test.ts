import { describe, expect, it } from 'vitest';
import { SeededRandom } from '../src/random.js';
import { arrivals, expectedRecords, SHAPES, shapeParams } from '../src/shapes.js';

describe('seeded load shapes', () => {
  it('replay the same arrivals and partitions for the same seed', () => {
    for (const shape of SHAPES) {
      const p = shapeParams(shape, { seed: 42 });
      expect([...arrivals(p)]).toEqual([...arrivals(p)]);
    }
  });

  it('give a different schedule for another seed', () => {
    const a = [...arrivals(shapeParams('steady', { seed: 1 }))];
    const b = [...arrivals(shapeParams('steady', { seed: 2 }))];
    expect(a.slice(0, 50)).not.toEqual(b.slice(0, 50));
  });

  it('keep arrivals in time order inside the schedule, on known partitions', () => {
    for (const shape of SHAPES) {
      const p = shapeParams(shape);
      let last = -1;
      for (const a of arrivals(p)) {
        expect(a.at).toBeGreaterThanOrEqual(last);
        expect(a.at).toBeLessThan(p.durationMs);
        expect(Number.isInteger(a.partition) && a.partition >= 0 && a.partition < p.keys).toBe(true);
        last = a.at;
      }
    }
  });

  it('offer about the expected number of records (Poisson count within 5 standard deviations)', () => {
    for (const shape of ['steady', 'skewed', 'gap'] as const) {
      const p = shapeParams(shape, { seed: 9 });
      const n = [...arrivals(p)].length;
      const mean = expectedRecords(p);
      // Source: a Poisson count has variance equal to its mean (standard probability).
      expect(Math.abs(n - mean)).toBeLessThan(5 * Math.sqrt(mean));
    }
    const burst = shapeParams('burst');
    expect([...arrivals(burst)].length).toBe(expectedRecords(burst));
  });

  it('leave the gap of the gap shape silent and the quiet partitions of the skewed shape nearly silent', () => {
    const gap = shapeParams('gap');
    const inGap = [...arrivals(gap)].filter((a) => a.at >= gap.gapAtMs! && a.at < gap.gapAtMs! + gap.gapMs!);
    expect(inGap).toHaveLength(0);
    const skewed = [...arrivals(shapeParams('skewed'))];
    const busy = skewed.filter((a) => a.partition === 0).length;
    expect(busy / skewed.length).toBeGreaterThan(0.99);
    expect(new Set(skewed.map((a) => a.partition)).size).toBeGreaterThan(1);
  });

  it('refuse a shape parameter that is not a positive number, naming it', () => {
    expect(() => shapeParams('steady', { rate: -1 })).toThrow(/`rate`/);
    expect(() => shapeParams('steady', { keys: 1.5 })).toThrow(/`keys`/);
  });

  it('draw uniform numbers in [0, 1) from the seeded source', () => {
    const rnd = new SeededRandom(123);
    let sum = 0;
    for (let i = 0; i < 10_000; i++) {
      const u = rnd.next();
      expect(u >= 0 && u < 1).toBe(true);
      sum += u;
    }
    // Mean of U(0,1) is 1/2 with standard error 1/sqrt(12·n) ≈ 0.0029 (standard probability).
    expect(Math.abs(sum / 10_000 - 0.5)).toBeLessThan(0.015);
  });
});
