import type { Command } from 'commander';
import { registerStimuli } from './stimuli.js';



/** Every command, in the order `sonde --help` lists them. Add a command: write its file, add it here. */
export const COMMANDS: ReadonlyArray<(program: Command) => void> = [registerStimuli];
