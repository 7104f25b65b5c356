import { benchCompressedRecord } from './compressed-record.js';
import { benchDecodeKernels } from './decode-kernels.js';
import { benchDiffThroughput } from './diff-throughput.js';
import { benchExportThroughput } from './export-throughput.js';
import { benchMeansRead } from './means-read.js';
import { benchRecordHugePages } from './record-huge-pages.js';
import { benchRecordOverhead } from './record-overhead.js';
import { benchRecordPeer } from './record-peer.js';
import { benchRecordMemory } from './record-memory.js';
import { benchReplayMemory } from './replay-memory.js';
import { benchSensitivityCost } from './sensitivity-cost.js';
import { benchSweepThroughput } from './sweep-throughput.js';
import { benchTailReplay } from './tail-replay.js';
import type { Benchmark } from './types.js';

/** Every benchmark by name. Add one: write `src/bench/<name>.ts` exporting a Benchmark, list it here. */
export const BENCHMARKS: Record<string, Benchmark> = {
  'record-overhead': benchRecordOverhead,
  'record-huge-pages': benchRecordHugePages,
  'record-peer': benchRecordPeer,
  'record-memory': benchRecordMemory,
  'diff-throughput': benchDiffThroughput,
  'export-throughput': benchExportThroughput,
  'tail-replay': benchTailReplay,
  'sensitivity-cost': benchSensitivityCost,
  'sweep-throughput': benchSweepThroughput,
  'replay-memory': benchReplayMemory,
  'decode-kernels': benchDecodeKernels,
  'compressed-record': benchCompressedRecord,
  'means-read': benchMeansRead,
};
