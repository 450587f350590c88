import { SHAPES } from '@spillway/tuner';
import { describe, expect, it } from 'vitest';
import { SHAPE_NAMES } from '../src/bench/shape-names.js';

describe('the shape names of the bench and tune flags', () => {
  it('are the tuner’s load shapes, in the same order', () => {
    expect([...SHAPE_NAMES]).toEqual([...SHAPES]);
  });
});
