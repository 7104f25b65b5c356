import { availableParallelism } from 'node:os';
import { CommanderError, type Command } from 'commander';
import { RuntimeFailure, SondeError, UsageError } from '../errors.js';
import { runInterruptHandlers } from '../disk/interrupt.js';
import { createProgram } from './program.js';
import { processIo, setCliIo, type CliIo } from './io.js';

/**
 * Parses `argv` (without node and script) and runs the command. This is the one place that catches
 * errors and decides the exit code: 0 success, 2 usage error, 1 runtime error; an interrupted run
 * (SIGINT, SIGTERM, only when writing to the process's own streams) exits 130 or 143 after one line.
 */
export async function runCli(argv: readonly string[], io: CliIo = processIo): Promise<number> {
  const program = createProgram();
  const output = { writeOut: io.stdout, writeErr: io.stderr, outputError: (text: string, write: (t: string) => void) => write(`sonde: ${oneLine(text.replace(/^error: /, '').replace(/\s+$/, ''))}\n`) };
  program.configureOutput(output);
  for (const command of program.commands) {
    command.configureOutput(output);
    for (const sub of command.commands) sub.configureOutput(output);
  }
  program.hook('preAction', (_program, action) => assertThreadsFit(action));
  const verbose = argv.includes('--verbose');
  const previous = setCliIo(io);
  const unhook = io === processIo ? handleSignals(argv, io) : () => undefined;
  try {
    await program.parseAsync([...argv], { from: 'user' });
    return 0;
  } catch (error) {
    return reportError(error, io, verbose);
  } finally {
    unhook();
    setCliIo(previous);
  }
}

/**
 * `--threads N` above the cores this process may use is refused: the runtime would start N threads per
 * session and crawl. The bound is `os.availableParallelism()` (the CPUs this process may run on, e.g.
 * a cluster job's allocation under cgroup/affinity limits).
 * @throws UsageError E_THREADS naming the value and the bound.
 */
function assertThreadsFit(action: Command): void {
  const threads = (action.opts() as { threads?: unknown }).threads;
  const cores = availableParallelism();
  if (typeof threads === 'number' && threads > cores) {
    throw new UsageError('E_THREADS', `--threads ${threads} is more than the ${cores} CPUs this process may use`, { hint: `pass at most --threads ${cores}, or 0 to let the runtime choose` });
  }
}

/**
 * While a command runs from the command line: on SIGINT or SIGTERM, run the interrupt handlers (the
 * manifest of an interrupted recording says why; folder locks are released), print one line saying how
 * to continue, and exit with 128 + the signal number.
 * @returns a function that removes the handlers.
 */
function handleSignals(argv: readonly string[], io: CliIo): () => void {
  const numbers: Record<string, number> = { SIGINT: 2, SIGTERM: 15 };
  const handler = (signal: NodeJS.Signals) => {
    runInterruptHandlers(signal);
    // a progress bar on a terminal is ended first; a log file gets exactly one line
    io.stderr(`${process.stderr.isTTY ? '\n' : ''}sonde: interrupted by ${signal}; ${continueHint(argv)}\n`);
    process.exit(128 + (numbers[signal] ?? 0));
  };
  process.on('SIGINT', handler);
  process.on('SIGTERM', handler);
  return () => {
    process.off('SIGINT', handler);
    process.off('SIGTERM', handler);
  };
}

/** How to continue an interrupted command: `record` resumes, a sweep reuses its finished cells, the rest run again. */
export function continueHint(argv: readonly string[]): string {
  const command = argv.find((a) => !a.startsWith('-')) ?? '';
  const line = `sonde ${argv.map(shellWord).join(' ')}`;
  if (command === 'record') return `resume with: ${argv.includes('--resume') ? line : `${line} --resume`}`;
  if (command === 'sweep') return `resume with: ${line} (finished cells are kept)`;
  return `run it again: ${line}`;
}

/** A word quoted for a POSIX shell when it needs it. */
function shellWord(word: string): string {
  return /^[\w@%+=:,./-]+$/.test(word) ? word : `'${word.replace(/'/g, `'\\''`)}'`;
}

/**
 * A message on one line: newlines and other control characters (from a path or a value the user
 * gave) are written as escapes, so an error is always exactly one line.
 */
export function oneLine(text: string): string {
  return text.replace(/[\u0000-\u001f\u007f]/g, (c) => (c === '\n' ? '\\n' : c === '\r' ? '\\r' : c === '\t' ? '\\t' : `\\x${c.charCodeAt(0).toString(16).padStart(2, '0')}`));
}

/**
 * A file-system error that escaped the code that should have worded it (ENOENT, EROFS, EACCES…), as
 * the one line every other failure gets: what was tried on which path, and why.
 */
function fileSystemFailure(error: unknown): RuntimeFailure | null {
  const e = error as NodeJS.ErrnoException;
  if (!(error instanceof Error) || typeof e.code !== 'string' || typeof e.syscall !== 'string') return null;
  const reasons: Record<string, string> = {
    ENOENT: 'no such file or folder',
    EROFS: 'the file system is read-only',
    EACCES: 'permission denied',
    EPERM: 'operation not permitted',
    ENOSPC: 'the disk is full',
    EDQUOT: 'the disk quota is exhausted',
    ENOTDIR: 'a part of the path is not a folder',
    EISDIR: 'it is a folder',
    EEXIST: 'it already exists',
    ELOOP: 'too many symbolic links (or a link where none is allowed)',
    EMFILE: 'too many open files',
  };
  const reason = reasons[e.code] ?? e.code;
  const what = e.syscall === 'mkdir' ? 'create folder' : e.syscall === 'open' ? 'open' : e.syscall === 'rename' ? 'rename' : e.syscall;
  return new RuntimeFailure(`E_FS_${e.code}`, `cannot ${what}${e.path ? ` ${e.path}` : ''}: ${reason}`, {
    hint: e.code === 'EROFS' || e.code === 'EACCES' ? 'write to a folder you may write (--out)' : e.code === 'ENOENT' && e.syscall === 'mkdir' ? 'check that the parent folder exists and can be written' : undefined,
    cause: error,
  });
}

function reportError(error: unknown, io: CliIo, verbose: boolean): number {
  if (error instanceof CommanderError) {
    // help and version "errors" are normal exits
    if (error.code === 'commander.helpDisplayed' || error.code === 'commander.version' || error.code === 'commander.help') return 0;
    return error.exitCode === 0 ? 0 : 2; // commander already printed its message
  }
  const known = error instanceof SondeError ? error : fileSystemFailure(error);
  if (known) {
    io.stderr(`sonde: ${oneLine(known.message)}${known.hint ? ` (${oneLine(known.hint)})` : ''}\n`);
    if (verbose && error instanceof Error && error.stack) io.stderr(`${error.stack}\n`);
    return known.exitCode;
  }
  const message = error instanceof Error ? error.message : String(error);
  io.stderr(`sonde: unexpected error: ${oneLine(message.split('\n')[0] ?? '')}${verbose ? '' : ' (run with --verbose for details)'}\n`);
  if (verbose && error instanceof Error && error.stack) io.stderr(`${error.stack}\n`);
  return 1;
}
