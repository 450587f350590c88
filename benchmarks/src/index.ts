// Public surface of the benchmark suite, used by the CLI's `bench` and `tune` commands and by tests.

export type { CellResult, CellSpec, LittleCheck, Settings, Stuck, Variant } from './cell-run.js';
export { drive, runCell } from './cell-run.js';
export { chartSpec, renderSvg } from './charts.js';
export type { MachineInfo } from './machine.js';
export { machineInfo } from './machine.js';
export type { Plan, StorePlan } from './plan.js';
export { cellId, cellsOf, graceFor } from './plan.js';
export { SeededRandom } from './random.js';
export type { Report, WrittenReport } from './report.js';
export { headlines, markdownTable, REPORT_VERSION, reportProblems, writeReport } from './report.js';
export type { CellAggregate, Figures, RunProgress } from './runner.js';
export { aggregate, median, runCellProcess, runCells } from './runner.js';
export type { Arrival, ShapeName, ShapeParams } from './shapes.js';
export { arrivals, expectedRecords, SHAPES, shapeParams } from './shapes.js';
export { SizeOnlyBatcher } from './size-only.js';
export type { StoreKind, StoreSpec } from './stores.js';
export { STORE_KINDS, storeLabel } from './stores.js';
export type { BenchFlags, SuiteOptions } from './suite-run.js';
export { applyFlags, defaultPlan, parseStore, quickPlan, runSuite, storeUrls } from './suite-run.js';
export type { TuneCandidate, TuneOptions, TuneOutcome } from './tune.js';
export { ageCandidates, formatTune, tune, tuneGrid } from './tune.js';
