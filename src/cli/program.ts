import { Command } from 'commander';
import { TOOL_VERSION } from '../version.js';
import { COMMANDS } from './commands/index.js';

/**
 * Builds the commander program with every command registered. Parsing never calls process.exit:
 * commander errors are thrown (exitOverride) and turned into exit codes by `runCli`.
 */
export function createProgram(): Command {
  const program = new Command('sonde')
    .description('Record every layer of an ONNX network, inject modulations, and diff the snapshots layer by layer.')
    .version(TOOL_VERSION)
    .option('--verbose', 'print stack traces and extra diagnostics')
    .exitOverride();
  for (const register of COMMANDS) register(program);
  for (const command of program.commands) {
    command.exitOverride();
    for (const sub of command.commands) sub.exitOverride();
  }
  return program;
}
