// Public surface of the tuner: load shapes, the cell runner, the stores a cell writes to, tune(),
// and the tunes on the user's own store: tuneTable(), tuneRedis(), tuneKafka(). Store-backed kinds load their adapter and driver only when a cell opens them, so
// importing this module needs neither pg, ioredis nor kafkajs.

export type { CellAggregate, Figures } from './aggregate.js';
export { aggregate, median } from './aggregate.js';
export { runCellProcess } from './cell-process.js';
export type { CellResult, LittleCheck, Stuck } from './cell-result.js';
export { runCell } from './cell-run.js';
export type { CellSpec, Settings, Variant } from './cell-spec.js';
export { cellId, graceFor } from './cell-spec.js';
export type { Box, ChartPoint, ChartSpec } from './chart-svg.js';
export { placeLabels, scatterSvg } from './chart-svg.js';
export type { TopicShape } from './kafka-topic.js';
export type { MachineInfo } from './machine.js';
export { machineInfo } from './machine.js';
export type { RecordSample } from './record-sample.js';
export type { DockStatus } from './records.js';
export type { KeyTemplate } from './redis-keys.js';
export { parseKeyTemplate, REDIS_MAPPINGS } from './redis-keys.js';
export type { RunProgress } from './runner.js';
export { runCells } from './runner.js';
export type { SearchOutcome, TuneTableEvent, Validation } from './search.js';
export type { SearchOptions } from './search-options.js';
export type { Arrival, ShapeName, ShapeParams } from './shapes.js';
export { arrivals, expectedRecords, SHAPES, shapeParams } from './shapes.js';
export type { OpenedStore, StoreKind, StoreSpec } from './store-spec.js';
export { DEFAULT_PG_URL, DEFAULT_REDIS_URL, STORE_KINDS, storeLabel } from './store-spec.js';
export { storeFromUrl } from './store-url.js';
export { openStore } from './stores.js';
export type { TableColumn, TableInfo } from './table-info.js';
export type { TableLoad, TableShape } from './table-load.js';
export type { RecordSet, TableRow, VariedColumn } from './table-records.js';
export type { RankedTrial, WriteCost } from './table-search.js';
export {
  byCost,
  ceilingOf,
  firstRound,
  fitWriteCost,
  judge,
  niceNumber,
  recommend,
  secondRound,
} from './table-search.js';
export type { TableTrial, WriteSums } from './table-trial.js';
export type { TuneCandidate, TuneOptions, TuneOutcome } from './tune.js';
export { ageCandidates, tune, tuneGrid } from './tune.js';
export { formatTune } from './tune-format.js';
export type { KafkaCompression, KafkaTuneOptions, KafkaTuneOutcome } from './tune-kafka.js';
export { tuneKafka } from './tune-kafka.js';
export { formatKafkaTune, kafkaChart, kafkaOptionsSnippet } from './tune-kafka-format.js';
export type { RedisMappingKind, RedisMappingSpec, RedisTuneOptions, RedisTuneOutcome } from './tune-redis.js';
export { tuneRedis } from './tune-redis.js';
export { formatRedisTune, redisChart, redisOptionsSnippet } from './tune-redis-format.js';
export type { TableMode, TableTuneOptions, TableTuneOutcome } from './tune-table.js';
export { tuneTable } from './tune-table.js';
export {
  formatTableTune,
  optionsSnippet,
  searchChart,
  tableChart,
  trialsTable,
} from './tune-table-format.js';
