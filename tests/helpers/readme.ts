/**
 * Runs the shell examples of a markdown file (the README) so that every example keeps working verbatim.
 *
 * Usage (one test file per README section, e.g. tests/readme/readme-examples.test.ts):
 *
 *   const commands = readmeCommands('README.md', 'Using it');      // the ```sh blocks under that heading
 *   const folder = readmeWorkFolder();                               // a temporary folder that sees bin/, models/, examples/
 *   for (const command of commands) await runReadmeCommand(command, folder);   // throws with the output on failure
 *
 * Rules the extraction follows, so that a README writer knows what is run:
 * - only fenced blocks whose info string is `sh` (```sh) under the given heading are taken, up to the next
 *   heading of any level (a subsection is a section of its own: test it under its own heading);
 * - a line ending in `\` continues on the next line; `#` comments (whole lines, or after two spaces at
 *   the end of a command) and blank lines are dropped;
 * - square brackets in an example (`[--json]`) mark optional parts and are not runnable: write them in
 *   a comment or outside ```sh blocks (`extractShellCommands` refuses a command that holds ` [--`).
 * Commands run with bash in the work folder, `./bin/sonde` being the repository's (the built dist/;
 * `ensureBuilt()` compiles it when a source is newer).
 */
import { execFile } from 'node:child_process';
import { mkdirSync, mkdtempSync, readFileSync, symlinkSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { ensureBuilt, ROOT } from '../robustness/cli-process.js';

/** The ```sh blocks (or ```LANGUAGE blocks) under `heading` (its text, without the #s) in `markdown`, in order. */
export function shellBlocks(markdown: string, heading: string, language = 'sh'): string[] {
  const lines = markdown.split('\n');
  const blocks: string[] = [];
  let level = 0; // heading level of the section we are in, 0 = not in it
  let fence: string[] | null = null;
  let inOtherFence = false;
  for (const line of lines) {
    const fenceMatch = /^```(\S*)\s*$/.exec(line);
    if (fence !== null) {
      if (fenceMatch && fenceMatch[1] === '') {
        blocks.push(fence.join('\n'));
        fence = null;
      } else fence.push(line);
      continue;
    }
    if (inOtherFence) {
      if (fenceMatch && fenceMatch[1] === '') inOtherFence = false;
      continue;
    }
    if (fenceMatch) {
      if (level > 0 && fenceMatch[1] === language) fence = [];
      else inOtherFence = true;
      continue;
    }
    const headingMatch = /^(#{1,6})\s+(.*?)\s*$/.exec(line);
    if (headingMatch) {
      const depth = headingMatch[1]!.length;
      level = headingMatch[2] === heading ? depth : 0;
    }
  }
  return blocks;
}

/**
 * The commands of one shell block: continuation lines joined, comments and blank lines dropped.
 * @throws Error on a command with an optional part in square brackets (` [--…]`), which cannot run verbatim.
 */
export function extractShellCommands(block: string): string[] {
  const commands: string[] = [];
  let current = '';
  for (const raw of block.split('\n')) {
    const line = raw.replace(/\s{2,}#.*$/, '').replace(/\s+$/, '');
    if (current === '' && (line.trim() === '' || line.trim().startsWith('#'))) continue;
    if (line.endsWith('\\')) {
      current += `${line.slice(0, -1).trim()} `;
      continue;
    }
    current += line.trim();
    if (/\s\[--/.test(current)) throw new Error(`README example has an optional part in brackets and cannot run verbatim: ${current}`);
    commands.push(current);
    current = '';
  }
  if (current !== '') commands.push(current.trim());
  return commands;
}

/** Every command of the ```sh blocks under `heading` of a markdown file (relative to the repository root). */
export function readmeCommands(file: string, heading: string): string[] {
  const blocks = shellBlocks(readFileSync(join(ROOT, file), 'utf8'), heading);
  if (blocks.length === 0) throw new Error(`${file} has no \`\`\`sh block under a heading "${heading}"`);
  return blocks.flatMap(extractShellCommands);
}

/**
 * A new temporary folder where `./bin/sonde`, `models/` and `examples/` are the repository's (links), and
 * `import … from 'sonde'` loads the repository's package (node_modules/sonde links to it), as after
 * `npm install /path/to/sonde`.
 */
export function readmeWorkFolder(): string {
  ensureBuilt();
  const folder = mkdtempSync(join(tmpdir(), 'sonde-readme-'));
  for (const entry of ['bin', 'models', 'examples']) symlinkSync(join(ROOT, entry), join(folder, entry));
  mkdirSync(join(folder, 'node_modules'));
  symlinkSync(ROOT, join(folder, 'node_modules', 'sonde'));
  return folder;
}

/**
 * Runs one README command with bash in `folder`.
 * @returns its stdout and stderr.
 * @throws Error naming the command, its exit code and its output when it fails.
 */
export function runReadmeCommand(command: string, folder: string, options: { env?: Record<string, string> } = {}): Promise<{ stdout: string; stderr: string }> {
  const env = { ...process.env, PATH: `${dirname(process.execPath)}:${process.env['PATH'] ?? ''}`, COLUMNS: '120', ...options.env };
  return new Promise((done, fail) => {
    execFile('bash', ['-e', '-o', 'pipefail', '-c', command], { cwd: folder, env, maxBuffer: 64 * 1024 * 1024 }, (error, stdout, stderr) => {
      if (error) fail(new Error(`README command failed (exit ${String((error as NodeJS.ErrnoException & { code?: unknown }).code)}): ${command}\n${stderr}\n${stdout}`.slice(0, 4000)));
      else done({ stdout, stderr });
    });
  });
}
