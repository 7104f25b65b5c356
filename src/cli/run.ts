import { CommanderError } from 'commander';
import { SondeError } from '../errors.js';
import { createProgram } from './program.js';
import { processIo, setCliIo, type CliIo } from './io.js';

/**
 * Parses `argv` (without node and script) and runs the command. This is the one place that catches
 * errors and decides the exit code: 0 success, 2 usage error, 1 runtime error.
 */
export async function runCli(argv: readonly string[], io: CliIo = processIo): Promise<number> {
  const program = createProgram();
  const output = { writeOut: io.stdout, writeErr: io.stderr, outputError: (text: string, write: (t: string) => void) => write(`sonde: ${text.replace(/^error: /, '')}`) };
  program.configureOutput(output);
  for (const command of program.commands) {
    command.configureOutput(output);
    for (const sub of command.commands) sub.configureOutput(output);
  }
  const verbose = argv.includes('--verbose');
  const previous = setCliIo(io);
  try {
    await program.parseAsync([...argv], { from: 'user' });
    return 0;
  } catch (error) {
    return reportError(error, io, verbose);
  } finally {
    setCliIo(previous);
  }
}

function reportError(error: unknown, io: CliIo, verbose: boolean): number {
  if (error instanceof CommanderError) {
    // help and version "errors" are normal exits
    if (error.code === 'commander.helpDisplayed' || error.code === 'commander.version' || error.code === 'commander.help') return 0;
    return error.exitCode === 0 ? 0 : 2; // commander already printed its message
  }
  if (error instanceof SondeError) {
    io.stderr(`sonde: ${error.message}${error.hint ? ` (${error.hint})` : ''}\n`);
    if (verbose && error.stack) io.stderr(`${error.stack}\n`);
    return error.exitCode;
  }
  const message = error instanceof Error ? error.message : String(error);
  io.stderr(`sonde: unexpected error: ${message.split('\n')[0]}${verbose ? '' : ' (run with --verbose for details)'}\n`);
  if (verbose && error instanceof Error && error.stack) io.stderr(`${error.stack}\n`);
  return 1;
}
