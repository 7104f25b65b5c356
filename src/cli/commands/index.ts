import type { Command } from 'commander';
import { registerCheck } from './check.js';
import { registerCluster } from './cluster.js';
import { registerMerge } from './merge.js';
import { registerDemo } from './demo.js';
import { registerDiff } from './diff.js';
import { registerHeads } from './heads.js';
import { registerExport } from './export.js';
import { registerLayers } from './layers.js';
import { registerPictures } from './pictures.js';
import { registerRecord } from './record.js';
import { registerReport } from './report.js';
import { registerSense } from './sense.js';
import { registerSizeMatched } from './size-matched.js';
import { registerStimuli } from './stimuli.js';
import { registerSweep } from './sweep.js';
import { registerTune } from './tune.js';

/** Every command, in the order `sonde --help` lists them. Add a command: write its file, add it here. */
export const COMMANDS: ReadonlyArray<(program: Command) => void> = [registerDemo, registerLayers, registerRecord, registerDiff, registerTune, registerSense, registerHeads, registerStimuli, registerSweep, registerSizeMatched, registerPictures, registerCheck, registerMerge, registerCluster, registerExport, registerReport];
