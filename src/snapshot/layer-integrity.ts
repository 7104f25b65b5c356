/**
 * Checking a layer file against its manifest entry before its numbers are used. The size is compared
 * up front (one `stat`, so a truncated or grown file is refused before anything is read); the SHA-256
 * is computed off the main thread while the reader streams the file (see file-hash.ts), and the reader
 * awaits it before it hands out the file's last batch, so no result built from a damaged file is ever
 * complete. A file verified once is remembered for the rest of the process (by device, inode, size and
 * times), so reading a layer again costs nothing extra.
 */
import { RuntimeFailure } from '../errors.js';
import { assertRegularFile } from '../disk/input-file.js';
import { hashFileOffThread } from './file-hash.js';
import type { ManifestLayer } from './manifest.js';

/**
 * How a reader checks layer files against the manifest: `sha256` (default) compares size and SHA-256;
 * `size-only` compares the size alone — faster, but a same-size change (a flipped byte) goes unnoticed.
 */
export type LayerVerification = 'sha256' | 'size-only';

/** Files whose SHA-256 matched, keyed by path and identity; value: the hash they matched. */
const verified = new Map<string, string>();

/**
 * Starts checking one layer file.
 * @param path the layer file (already resolved inside its snapshot folder).
 * @param entry its manifest entry (`bytes`, `sha256`; a check whose value the manifest lacks is skipped).
 * @param snapshot the snapshot folder, for messages.
 * @param mode see `LayerVerification`.
 * @returns a function that resolves once the hash matched (immediately for `size-only`, a file already
 *   verified, or an entry without a hash) and rejects with RuntimeFailure `E_LAYER_INTEGRITY` otherwise.
 * @throws UsageError when the path is not a regular file; RuntimeFailure `E_LAYER_INTEGRITY` when its size
 *   differs from the manifest's.
 */
export function startLayerCheck(path: string, entry: ManifestLayer, snapshot: string, mode: LayerVerification): () => Promise<void> {
  const stats = assertRegularFile(path, `layer file ${path} of "${entry.name}"`);
  const fix = `run \`sonde check ${snapshot}\` to list the damaged files, then restore them or record the snapshot again`;
  if (entry.bytes !== undefined && stats.size !== entry.bytes) {
    throw new RuntimeFailure('E_LAYER_INTEGRITY', `layer file ${path} of "${entry.name}" is ${stats.size} bytes, the manifest says ${entry.bytes} (truncated or changed after recording)`, { hint: fix });
  }
  const expected = entry.sha256;
  if (mode === 'size-only' || expected === undefined) return () => Promise.resolve();
  const key = `${path}\0${stats.dev}:${stats.ino}:${stats.size}:${stats.mtimeMs}:${stats.ctimeMs}`;
  if (verified.get(key) === expected) return () => Promise.resolve();
  const checked = hashFileOffThread(path).then(
    (hash) => {
      if (hash.sha256 !== expected || (entry.bytes !== undefined && hash.bytes !== entry.bytes)) {
        throw new RuntimeFailure('E_LAYER_INTEGRITY', `layer file ${path} of "${entry.name}" does not match the SHA-256 in the manifest (it changed or was damaged after recording)`, { hint: fix });
      }
      verified.set(key, expected);
    },
    (error: Error) => {
      throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} of "${entry.name}" cannot be read to verify it (${error.message})`, { hint: fix });
    },
  );
  checked.catch(() => undefined); // surfaced when the reader awaits it
  return () => checked;
}
