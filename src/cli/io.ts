/** The CLI's output sink: commands print through `cliIo()`, never console.log, so tests capture it in-process. */
/** Where the CLI writes; tests pass their own to capture output in-process. */
export interface CliIo {
  stdout: (text: string) => void;
  stderr: (text: string) => void;
}

/**
 * The width terminal output is laid out for: `COLUMNS` when set to a whole number (at least 40), else the
 * terminal's width when stdout is a terminal, else no limit (output to a file or a pipe keeps one line
 * per table row and per sentence, for scripts that search it).
 */
export function outputColumns(): number {
  const fromEnv = Number(process.env['COLUMNS']);
  if (Number.isInteger(fromEnv) && fromEnv > 0) return Math.max(40, fromEnv);
  if (process.stdout.isTTY && process.stdout.columns > 0) return Math.max(40, process.stdout.columns);
  return Number.POSITIVE_INFINITY;
}

/** The process's own stdout and stderr (the default sink). */
export const processIo: CliIo = {
  stdout: (text) => process.stdout.write(text),
  stderr: (text) => process.stderr.write(text),
};

let currentIo: CliIo = processIo;

/** The output sink of the command now running (commands print through this, never console.log). */
export function cliIo(): CliIo {
  return currentIo;
}

/**
 * Makes `io` the sink of the command about to run (`runCli` only).
 * @returns the sink it replaces, to restore when the command ends.
 */
export function setCliIo(io: CliIo): CliIo {
  const previous = currentIo;
  currentIo = io;
  return previous;
}
