import { existsSync, lstatSync, mkdirSync, readdirSync, realpathSync, rmdirSync, rmSync, statSync } from 'node:fs';
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';
import { basename, dirname, join, resolve, sep } from 'node:path';
import { UsageError } from '../errors.js';
import { replaceFile, UNIQUE_TEMPORARY } from '../disk/atomic-file.js';
import { acquireLock, LOCK_FILE, type FolderLock } from '../disk/lock.js';
import { onInterrupt } from '../disk/interrupt.js';
import { readManifest, type SnapshotManifest } from '../snapshot/manifest.js';
import { DIGEST_LOG_FILE, PROGRESS_FILE, readProgress, type ProgressRecord } from '../snapshot/progress-file.js';
import { meansFileName } from '../snapshot/layer-file.js';

/** Default parent folder for `--out` names without a slash. */
export const DEFAULT_SNAPSHOT_PARENT = 'snapshots';

/** `--out NAME` without a slash goes under `snapshots/`; anything else is a path. */
export function resolveOutFolder(out: string): string {
  if (!out || out.trim() === '') throw new UsageError('E_OUT', '--out is empty', { hint: 'name a folder, e.g. --out base' });
  return resolve(out.includes('/') || out.includes('\\') ? out : join(DEFAULT_SNAPSHOT_PARENT, out));
}

/**
 * Top-level entries a recording writes into its folder (besides `layers/`): the manifest, the stimulus
 * table, the checkpoint files, the writer lock, and their temporaries. Only these — and layer files in
 * `layers/` — are ever deleted when a folder is prepared for a new recording.
 */
export const SNAPSHOT_ENTRIES: ReadonlySet<string> = new Set([
  'manifest.json',
  'manifest.json.partial',
  'stimuli.arrow',
  'stimuli.arrow.partial',
  PROGRESS_FILE,
  `${PROGRESS_FILE}.partial`,
  DIGEST_LOG_FILE,
  LOCK_FILE,
]);

/**
 * Whether a top-level name is one of `entries` or the per-writer temporary of one of them
 * (`manifest.json.<pid>-<8 hex>.partial`, see `uniqueTemporary`).
 */
function isOwnEntry(name: string, entries: ReadonlySet<string>): boolean {
  return entries.has(name) || (UNIQUE_TEMPORARY.test(name) && entries.has(name.replace(UNIQUE_TEMPORARY, '')));
}

/** What an output folder holds, decided before anything in it is touched. */
export interface OutFolderState {
  /** `fresh`: missing, empty, or only what a run killed before its first manifest leaves. */
  kind: 'fresh' | 'snapshot' | 'damaged-snapshot' | 'foreign';
  /** For `snapshot`: whether it is complete. */
  complete: boolean;
  /** Files Sonde wrote, relative to the folder (what a new recording deletes; the lock excluded). */
  owned: string[];
  /** Entries Sonde did not write, relative to the folder (non-empty only for `foreign`). */
  foreign: string[];
  /** For `damaged-snapshot` and a foreign `manifest.json`: why its manifest was not accepted. */
  reason?: string;
}

/**
 * Looks at an output folder without changing it: which of its files a recording wrote, and which it
 * did not. A folder is a snapshot when its `manifest.json` validates; it is a damaged snapshot when the
 * manifest was written by Sonde (`tool.name` is "sonde") but no longer validates. Symbolic links, and
 * anything that is not a regular file where Sonde writes files, count as foreign.
 * @param folder the folder (need not exist).
 * @returns its state; `foreign` lists at most the first 20 foreign entries.
 * @throws UsageError when `folder` exists and is not a folder.
 */
export function inspectOutFolder(folder: string): OutFolderState {
  if (!existsSync(folder)) return { kind: 'fresh', complete: false, owned: [], foreign: [] };
  if (!statSync(folder).isDirectory()) {
    throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`, { hint: 'choose a new or empty folder' });
  }
  const owned: string[] = [];
  const foreign: string[] = [];
  const listed = listedLayerFiles(folder);
  for (const name of readdirSync(folder).sort()) {
    const stat = lstatSync(join(folder, name));
    if (name === 'layers' && stat.isDirectory()) {
      for (const file of readdirSync(join(folder, name)).sort()) {
        const path = `layers/${file}`;
        // a layer file is Sonde's only when the manifest or the checkpoint lists it (a user's own
        // layers/900-export.arrow is never deleted, whatever its name looks like)
        if (listed.has(path) && lstatSync(join(folder, path)).isFile()) {
          owned.push(path);
        } else foreign.push(path);
      }
    } else if (isOwnEntry(name, SNAPSHOT_ENTRIES) && stat.isFile()) {
      if (name !== LOCK_FILE) owned.push(name);
    } else foreign.push(name);
  }
  const state = (kind: OutFolderState['kind'], complete: boolean, reason?: string): OutFolderState => ({ kind, complete, owned, foreign: foreign.slice(0, 20), ...(reason !== undefined ? { reason } : {}) });
  const hasManifest = owned.includes('manifest.json');
  if (!hasManifest) {
    // what a run killed before its first manifest leaves behind does not make the folder foreign;
    // anything else without a manifest is not known to be Sonde's
    const unexplained = owned.filter((name) => !name.startsWith('manifest.json.') || !name.endsWith('.partial'));
    if (foreign.length === 0 && unexplained.length === 0) return state('fresh', false);
    foreign.push(...unexplained);
    owned.length = 0;
    return state('foreign', false);
  }
  let manifest: SnapshotManifest;
  try {
    manifest = readManifest(folder);
  } catch (error) {
    const reason = (error as Error).message;
    if (!writtenBySonde(join(folder, 'manifest.json'))) {
      foreign.unshift('manifest.json');
      return state('foreign', false, reason);
    }
    return state(foreign.length > 0 ? 'foreign' : 'damaged-snapshot', false, reason);
  }
  return state(foreign.length > 0 ? 'foreign' : 'snapshot', manifest.complete);
}

/** Whether a manifest file, valid or not, says Sonde wrote it. */
function writtenBySonde(path: string): boolean {
  return sondeManifestJson(path) !== null;
}

/** The parsed manifest file when it says Sonde wrote it (valid or not), else null. */
function sondeManifestJson(path: string): { layers?: unknown } | null {
  try {
    const value = JSON.parse(readInputText(path, path, INPUT_LIMITS.json)) as { tool?: { name?: unknown }; layers?: unknown } | null;
    return typeof value === 'object' && value !== null && value.tool?.name === 'sonde' ? value : null;
  } catch {
    return null;
  }
}

/**
 * The layer files (`layers/NAME` and their `.partial`) that the folder's Sonde manifest file (valid or
 * not) or its checkpoint (`progress.json`) lists; empty when neither is Sonde's.
 */
function listedLayerFiles(folder: string): Set<string> {
  const listed = new Set<string>();
  const add = (file: unknown) => {
    // only plain names inside layers/ (a file "from" the baseline lives in the baseline's folder)
    if (typeof file !== 'string' || !/^layers\/[^/\\]+$/.test(file) || file.includes('..')) return;
    listed.add(file);
    listed.add(`${file}.partial`);
    // the channel-means file a full layer's writer adds when it finishes (snapshot format 3)
    listed.add(meansFileName(file));
    listed.add(`${meansFileName(file)}.partial`);
  };
  const layers = sondeManifestJson(join(folder, 'manifest.json'))?.layers;
  if (Array.isArray(layers)) {
    for (const layer of layers as Array<{ file?: unknown; from?: unknown; means?: { file?: unknown } | null } | null>) {
      if (layer?.from === 'baseline') continue;
      add(layer?.file);
      if (typeof layer?.means === 'object' && layer.means !== null) add(layer.means.file);
    }
  }
  try {
    const progress = readProgress(folder);
    if (progress) for (const file of Object.keys(progress.files)) add(file);
  } catch {
    // an unreadable checkpoint lists nothing
  }
  return listed;
}

/**
 * Throws unless a new recording may go into `folder`: it must be fresh, an incomplete snapshot (an
 * interrupted recording, replaced), or — with `force` — a complete or damaged snapshot. A folder
 * holding anything Sonde did not write is refused, with or without `force`.
 * @returns the folder's state (what `prepareOutFolder` deletes).
 * @throws UsageError E_OUT (not a folder, or foreign entries), E_OUT_EXISTS (a complete or damaged
 *   snapshot without `force`).
 */
export function assertOutFolderUsable(folder: string, force: boolean): OutFolderState {
  const state = inspectOutFolder(folder);
  if (state.kind === 'foreign') {
    const found = `${state.foreign.join(', ')}${state.foreign.length >= 20 ? ', …' : ''}`;
    if (state.owned.includes('manifest.json') && !state.foreign.includes('manifest.json')) {
      throw new UsageError('E_OUT', `--out ${folder} holds a Sonde snapshot and also entries Sonde did not write (${found}); refusing to replace it${force ? ', even with --force' : ''}`, {
        hint: 'move those entries out of the folder, or choose an empty folder',
      });
    }
    const what = state.foreign.includes('manifest.json') ? `a manifest.json that Sonde did not write (${state.reason ?? 'unreadable'})` : `found ${found}`;
    throw new UsageError('E_OUT', `--out ${folder} is not empty and holds no snapshot (${what}); refusing to write into it${force ? ', even with --force (Sonde only deletes what it wrote)' : ''}`, {
      hint: 'choose a new or empty folder',
    });
  }
  if (!force && state.kind === 'snapshot' && state.complete) {
    throw new UsageError('E_OUT_EXISTS', `--out ${folder} already holds a complete snapshot`, { hint: 'pass --force to replace it, or choose another --out' });
  }
  if (!force && state.kind === 'damaged-snapshot') {
    throw new UsageError('E_OUT_EXISTS', `--out ${folder} holds a Sonde snapshot whose manifest fails validation (${state.reason ?? 'unreadable'})`, {
      hint: `inspect it with \`sonde check ${folder}\`; pass --force to replace it, or choose another --out`,
    });
  }
  return state;
}

/**
 * Makes `folder` ready for a new recording (see `assertOutFolderUsable` for what is accepted): deletes
 * exactly the files a recording wrote there (never the lock, never anything else) and creates `layers/`.
 * @throws UsageError as `assertOutFolderUsable`.
 */
export function prepareOutFolder(folder: string, force: boolean): void {
  const state = assertOutFolderUsable(folder, force);
  for (const name of state.owned) rmSync(join(folder, name), { force: true });
  mkdirSync(join(folder, 'layers'), { recursive: true });
}

/** What `sonde sweep` writes into its folder: the cell table, the summary, the progress log, their temporaries, the writer lock. */
export const SWEEP_ENTRIES: ReadonlySet<string> = new Set(['cells.jsonl', 'cells.arrow', 'cells.arrow.partial', 'sweep.json', 'sweep.json.partial', LOCK_FILE]);

/**
 * Makes `folder` ready for a sweep and locks it (`.lock`, as a snapshot folder): creates it, or accepts
 * it when it holds nothing but what a sweep writes (an earlier or interrupted sweep, whose cells the
 * sweep itself reuses or restarts). A second sweep into the same folder is refused while the first runs.
 * @returns the lock; release it when the sweep ends (also after errors).
 * @throws UsageError E_OUT when the path is not a folder, or the folder holds anything else;
 *   RuntimeFailure E_LOCK when another live process is sweeping into it.
 */
export function prepareSweepFolder(folder: string, options: { onNotice?: (text: string) => void } = {}): FolderLock {
  if (existsSync(folder)) {
    if (!statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`, { hint: 'choose a new or empty folder' });
    const foreign = readdirSync(folder).sort().filter((name) => !isOwnEntry(name, SWEEP_ENTRIES) || !lstatSync(join(folder, name)).isFile());
    if (foreign.length > 0) {
      throw new UsageError('E_OUT', `--out ${folder} is not empty and is not a sweep folder (found ${foreign.slice(0, 20).join(', ')}${foreign.length > 20 ? ', …' : ''}); refusing to write into it`, {
        hint: 'choose a new or empty folder for the sweep',
      });
    }
  }
  mkdirSync(folder, { recursive: true });
  return acquireLock(folder, { label: `sweep folder ${folder}`, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
}

/** The file that marks a folder as written by `sonde demo`; it lists every file the demo wrote there. */
export const DEMO_MARK = '.sonde-demo.json';

/** A demo output folder, prepared by `prepareDemoFolder`. */
export interface DemoFolder {
  folder: string;
  /**
   * Records every file now in the folder as the demo's (call it after each step, and with `complete`
   * at the end), so that a later run knows what it may delete.
   */
  settle(complete: boolean): void;
}

interface DemoMark {
  tool: 'sonde';
  kind: 'demo';
  complete: boolean;
  files: string[];
}

/**
 * Makes `folder` ready for a demo run: a missing or empty folder is used as it is; a folder an earlier
 * demo wrote (it holds `DEMO_MARK`) is emptied of exactly the files that demo listed — after an
 * interrupted demo also of the entries its unfinished step created — and anything else is refused.
 * @throws UsageError E_OUT when the folder is not a folder, holds files and no demo mark, or holds files
 *   the demo did not write (listed, at most 20).
 */
export function prepareDemoFolder(folder: string): DemoFolder {
  if (existsSync(folder) && !statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`, { hint: 'choose a new or empty folder' });
  const present = existsSync(folder) ? filesUnder(folder) : [];
  if (present.length > 0) {
    const mark = readDemoMark(folder);
    if (!mark) {
      throw new UsageError('E_OUT', `--out ${folder} is not empty and was not written by sonde demo (it has no ${DEMO_MARK}; found ${present.slice(0, 5).join(', ')}${present.length > 5 ? ', …' : ''}); refusing to delete it`, {
        hint: 'choose a new or empty folder for the demo',
      });
    }
    const listed = new Set(mark.files);
    const listedTop = new Set(mark.files.map((f) => f.split('/')[0]!));
    const foreign = present.filter((f) => !listed.has(f) && (mark.complete || listedTop.has(f.split('/')[0]!)));
    if (foreign.length > 0) {
      throw new UsageError('E_OUT', `--out ${folder} holds files the demo did not write (${foreign.slice(0, 20).join(', ')}${foreign.length > 20 ? ', …' : ''}); refusing to replace the folder`, {
        hint: 'move those files out of the folder, or choose a new folder for the demo',
      });
    }
    for (const file of present) rmSync(join(folder, file), { force: true });
    removeEmptyFolders(folder);
  }
  mkdirSync(folder, { recursive: true });
  const settle = (complete: boolean): void => {
    const mark: DemoMark = { tool: 'sonde', kind: 'demo', complete, files: filesUnder(folder) };
    replaceFile(join(folder, DEMO_MARK), `${JSON.stringify(mark, null, 1)}\n`);
  };
  settle(false);
  return { folder, settle };
}

function readDemoMark(folder: string): DemoMark | null {
  try {
    const path = join(folder, DEMO_MARK);
    if (!lstatSync(path).isFile()) return null;
    const value = JSON.parse(readInputText(path, path, INPUT_LIMITS.json)) as Partial<DemoMark> | null;
    if (!value || value.tool !== 'sonde' || value.kind !== 'demo' || typeof value.complete !== 'boolean' || !Array.isArray(value.files) || !value.files.every((f) => typeof f === 'string')) return null;
    return value as DemoMark;
  } catch {
    return null;
  }
}

/** Every non-folder entry below `folder` (links included, not followed), relative with `/`, sorted; the demo mark excluded. */
function filesUnder(folder: string): string[] {
  const found: string[] = [];
  const walk = (relative: string): void => {
    for (const name of readdirSync(join(folder, relative)).sort()) {
      const path = relative === '' ? name : `${relative}/${name}`;
      if (path === DEMO_MARK || path === `${DEMO_MARK}.partial`) continue;
      if (lstatSync(join(folder, path)).isDirectory()) walk(path);
      else found.push(path);
    }
  };
  walk('');
  return found;
}

/** Removes the folders below `folder` that are empty (deepest first); `folder` itself stays. */
function removeEmptyFolders(folder: string): void {
  const visit = (path: string): void => {
    for (const name of readdirSync(path)) {
      const child = join(path, name);
      if (!lstatSync(child).isDirectory()) continue;
      visit(child);
      if (readdirSync(child).length === 0) rmdirSync(child);
    }
  };
  visit(folder);
}

/** An output folder opened for writing: locked, and either fresh or holding a recording to resume. */
export interface OpenedOutput {
  folder: string;
  /** The writer lock; release it when done (also after errors). */
  lock: FolderLock;
  /** With `resume`: the interrupted recording's manifest and its last checkpoint (null: none reached). */
  resume: { manifest: SnapshotManifest; progress: ProgressRecord | null } | null;
  /** With `resume`: the folder already holds this complete snapshot; there is nothing to do. */
  complete: SnapshotManifest | null;
}

/** Options of `openOutputFolder`. */
export interface OpenOutputOptions {
  /** Replace a complete snapshot (ignored with `resume`, which never replaces one). */
  force: boolean;
  /** Continue an interrupted recording when the folder holds one; start afresh otherwise. */
  resume: boolean;
  /** Receives one-line notices (a stale lock taken over). */
  onNotice?: (text: string) => void;
}

/**
 * Creates (if needed) and locks an output folder, then prepares it: with `resume`, an incomplete
 * snapshot is kept for continuing, a complete one is reported (nothing is touched), and a missing or
 * empty folder starts afresh — so a resumed job can simply be run again until it completes. Without
 * `resume`, as `prepareOutFolder`.
 * @throws UsageError for a path that is not a folder, a non-empty folder that holds no snapshot, a
 *   complete snapshot without `force`, or (resuming) a malformed manifest; RuntimeFailure when another
 *   live process holds the lock, or the checkpoint file is damaged.
 */
export function openOutputFolder(folder: string, options: OpenOutputOptions): OpenedOutput {
  if (existsSync(folder) && !statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`);
  // refuse a folder that is not Sonde's before the lock file is written into it
  // resuming a Sonde recording: its manifest must validate; anything else is judged like a new output
  if (options.resume && existsSync(join(folder, 'manifest.json')) && writtenBySonde(join(folder, 'manifest.json'))) readManifest(folder);
  else assertOutFolderUsable(folder, options.force);
  mkdirSync(folder, { recursive: true });
  const held = acquireLock(folder, { label: `snapshot folder ${folder}`, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  // interrupted while writing: the manifest says why (before the lock goes, see disk/interrupt.ts)
  const unregister = onInterrupt((signal) => markInterrupted(folder, signal));
  const lock: FolderLock = {
    ...held,
    release() {
      unregister();
      held.release();
    },
  };
  try {
    if (options.resume && existsSync(join(folder, 'manifest.json'))) {
      const manifest = readManifest(folder);
      if (manifest.complete) return { folder, lock, resume: null, complete: manifest };
      mkdirSync(join(folder, 'layers'), { recursive: true });
      return { folder, lock, resume: { manifest, progress: readProgress(folder) }, complete: null };
    }
    prepareOutFolder(folder, options.force);
    return { folder, lock, resume: null, complete: null };
  } catch (error) {
    lock.release();
    throw error;
  }
}

/**
 * Writes the reason into an incomplete snapshot's manifest when the recording is interrupted by a
 * signal (`"error": "interrupted by SIGTERM"`); a complete manifest, or none, is left alone.
 */
function markInterrupted(folder: string, signal: string): void {
  const path = join(folder, 'manifest.json');
  const manifest = sondeManifestJson(path) as { complete?: unknown; error?: unknown } | null;
  if (!manifest || manifest.complete === true) return;
  manifest.complete = false;
  manifest.error = `interrupted by ${signal}`;
  replaceFile(path, `${JSON.stringify(manifest, null, 2)}\n`);
}

/** An input a command reads, for `assertApartFromInputs`: the option naming it and its path. */
export interface CommandInput {
  /** The option or argument, for messages (`--from`, `SNAPSHOT`). */
  option: string;
  /** Its path; undefined or null when the option was not given. */
  path: string | undefined | null;
  /** The input must be a file: a folder there is left for its reader to report. */
  file?: boolean;
}

/**
 * Throws when an output would overwrite, lie inside, or contain one of the command's inputs, compared by
 * real path (so a symbolic link or `..` in either name does not hide the overlap). Run before anything
 * is written: `record --from X --out X --force` must leave X as it is.
 * @param out the output path (file or folder; need not exist).
 * @param outOption its option, for messages (`--out`, `--csv`).
 * @param inputs the command's inputs; missing paths are skipped (their own readers report them).
 * @throws UsageError E_OUT_IS_INPUT naming both paths.
 */
export function assertApartFromInputs(out: string, outOption: string, inputs: readonly CommandInput[]): void {
  const target = realPathOf(out);
  for (const input of inputs) {
    if (input.path === undefined || input.path === null || input.path === '' || !existsSync(input.path)) continue;
    const source = realpathSync(input.path);
    if (input.file && statSync(source).isDirectory()) continue;
    if (source === target) {
      throw new UsageError('E_OUT_IS_INPUT', `${outOption} ${out} is ${input.option} ${input.path} itself (both are ${source}); writing it would destroy the input`, { hint: `choose another ${outOption}` });
    }
    if (isInside(target, source) && statSync(source).isDirectory()) {
      throw new UsageError('E_OUT_IS_INPUT', `${outOption} ${out} lies inside ${input.option} ${input.path} (${source}); writing there would change that input`, { hint: `choose a ${outOption} outside ${input.path}` });
    }
    if (isInside(source, target)) {
      throw new UsageError('E_OUT_IS_INPUT', `${input.option} ${input.path} lies inside ${outOption} ${out} (${target}); replacing ${out} could delete it`, { hint: `choose a ${outOption} that does not contain the inputs` });
    }
  }
}

/** The real path of `path`, or for a path that does not exist yet, its nearest existing parent's real path joined with the rest. */
function realPathOf(path: string): string {
  const absolute = resolve(path);
  const rest: string[] = [];
  let at = absolute;
  for (;;) {
    try {
      return join(realpathSync(at), ...rest.reverse());
    } catch {
      const parent = dirname(at);
      if (parent === at) return absolute;
      rest.push(basename(at));
      at = parent;
    }
  }
}

function isInside(child: string, parent: string): boolean {
  return child.startsWith(parent.endsWith(sep) ? parent : `${parent}${sep}`);
}

/** A file-name-safe short form of a tensor name. */
export function slugify(name: string): string {
  const slug = name.replace(/[^A-Za-z0-9._-]+/g, '-').replace(/^[-.]+|-+$/g, '').slice(-60);
  return slug.length > 0 ? slug : 'tensor';
}
