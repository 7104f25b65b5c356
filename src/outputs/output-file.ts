/**
 * The rule for single-file outputs (`tune --out T.arrow`, `sense --out`, `diff --csv`, `report --out`,
 * `merge PARTIALS --out`): an existing file is replaced only with `--force`, never a folder or a
 * special file, and never one of the command's inputs. The files themselves are written under a
 * temporary name and renamed over the target (`replaceFile`, `HashingFileSink`), so a failed write
 * leaves the previous file as it was.
 */
import { lstatSync } from 'node:fs';
import { UsageError } from '../errors.js';
import { assertApartFromInputs, type CommandInput } from './output-folder.js';

/** Options of `assertOutFileWritable`. */
export interface OutFileOptions {
  /** The option naming the file, for messages (default `--out`). */
  option?: string;
  /** Replace an existing regular file. */
  force?: boolean;
  /** The command's inputs, which the file must not be (or lie inside). */
  inputs?: readonly CommandInput[];
}

/**
 * Throws unless `path` may be written: it does not exist, or is a regular file (or a link) and `force`
 * is set; it is none of the inputs. Call it before the work that produces the file, so a refusal costs
 * nothing.
 * @throws UsageError E_OUT (empty name, a folder, a FIFO or device), E_OUT_EXISTS (an existing file
 *   without `force`), E_OUT_IS_INPUT (the path is or lies inside an input).
 */
export function assertOutFileWritable(path: string, options: OutFileOptions = {}): void {
  const option = options.option ?? '--out';
  if (path.trim() === '') throw new UsageError('E_OUT', `${option} is empty`, { hint: 'name a file' });
  assertApartFromInputs(path, option, options.inputs ?? []);
  let stat;
  try {
    stat = lstatSync(path);
  } catch {
    return;
  }
  if (stat.isDirectory()) throw new UsageError('E_OUT', `${option} ${path} is a folder, not a file`, { hint: `name a file inside it, e.g. ${option} ${path.replace(/\/+$/, '')}/result` });
  if (!stat.isFile() && !stat.isSymbolicLink()) throw new UsageError('E_OUT', `${option} ${path} exists and is not a regular file (a FIFO, socket or device)`, { hint: `choose another ${option}` });
  if (!options.force) {
    throw new UsageError('E_OUT_EXISTS', `${option} ${path} already exists (${stat.isSymbolicLink() ? 'a symbolic link' : `${stat.size} bytes`}); refusing to overwrite it`, { hint: `pass --force to replace it, or choose another ${option}` });
  }
}
