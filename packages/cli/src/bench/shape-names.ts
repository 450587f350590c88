// The load shapes' names for the commands' help and flag checks, kept here so that registering
// the commands does not load the tuner (a unit test checks they match the tuner's SHAPES).
export const SHAPE_NAMES = ['steady', 'trickle', 'skewed', 'burst', 'gap'] as const;
export type ShapeName = (typeof SHAPE_NAMES)[number];
