import type { Command } from 'commander';
import { registerDiff } from './diff.js';
import { registerLayers } from './layers.js';
import { registerRecord } from './record.js';
import { registerReport } from './report.js';
import { registerSense } from './sense.js';
import { registerStimuli } from './stimuli.js';
import { registerSweep } from './sweep.js';
import { registerTune } from './tune.js';

/** Every command, in the order `sonde --help` lists them. Add a command: write its file, add it here. */
export const COMMANDS: ReadonlyArray<(program: Command) => void> = [registerLayers, registerRecord, registerDiff, registerTune, registerSense, registerStimuli, registerSweep, registerReport];
