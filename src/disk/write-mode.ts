/**
 * How a recording's layer files reach the disk. `cached` writes through the page cache, as every
 * program does by default: the kernel copies each byte into cache pages it allocates, and writes them
 * out later. `direct` opens the file a second time with O_DIRECT and writes whole aligned blocks
 * straight from the writer thread's own buffer to the device: no kernel copy, no page-cache pages to
 * allocate, at the cost of the written bytes not staying in the page cache (a `diff` right after a
 * record reads them from disk). `auto` (the default) writes directly on local disk file systems and
 * through the cache everywhere else (network and cluster file systems, tmpfs, overlays), where O_DIRECT
 * is slow, refused or means something else.
 *
 * Measured on the 2-core development machine (2 GiB written in 32 MiB chunks, fsync at the end): the
 * page cache 329–1034 MB/s with 1.3–5.6 s of kernel CPU, O_DIRECT 1284–1630 MB/s with 0.12 s of kernel
 * CPU; README "Where a recording's time goes".
 */
import { statfsSync } from 'node:fs';
import { dirname } from 'node:path';
import { UsageError } from '../errors.js';

/** How layer files are written: see the module comment. */
export type DiskWriteMode = 'auto' | 'direct' | 'cached';

export const DISK_WRITE_MODES: readonly DiskWriteMode[] = ['auto', 'direct', 'cached'];

/**
 * Local disk file systems, by their statfs magic number (linux/magic.h), where O_DIRECT writes whole
 * blocks to the device: ext2/3/4, XFS, btrfs, F2FS, bcachefs.
 */
const LOCAL_DISK_FILE_SYSTEMS = new Map<number, string>([
  [0xef53, 'ext4'],
  [0x58465342, 'xfs'],
  [0x9123683e, 'btrfs'],
  [0xf2f52010, 'f2fs'],
  [0xca451a4e, 'bcachefs'],
]);

/** Checks a `--disk-writes` value. @throws UsageError naming the value and the choices */
export function parseDiskWriteMode(text: string): DiskWriteMode {
  if ((DISK_WRITE_MODES as readonly string[]).includes(text)) return text as DiskWriteMode;
  throw new UsageError('E_DISK_WRITES', `--disk-writes ${JSON.stringify(text)} is not a write mode`, { hint: `use one of ${DISK_WRITE_MODES.join(', ')} (auto: direct on local disk file systems, cached elsewhere)` });
}

/**
 * Smallest usual write (`writeBytes`) that `auto` sends to the disk directly. Each direct write waits
 * for the device, so many small ones cost more than the page cache's copies: recording the 47 default
 * layers of the 64 px residual reference network (1.2 MB a stimulus) took 3.9–4.4 s direct against
 * 3.1 s cached at 8 stimuli a write (about 200 kB a layer), and 2.4 s direct against 3.3 s cached at
 * 64 (about 1.6 MB).
 */
export const DIRECT_MIN_WRITE_BYTES = 1 << 20;

/**
 * Whether a file at `path` is to be written with O_DIRECT under `mode`: `direct` always (the writer
 * still falls back to cached writes where the file system refuses), `cached` never, `auto` on Linux
 * when the folder holding `path` is on a local disk file system and the file's usual write
 * (`writeBytes`, when known) is at least `DIRECT_MIN_WRITE_BYTES`.
 */
export function wantsDirectWrites(path: string, mode: DiskWriteMode, writeBytes?: number): boolean {
  if (mode === 'cached') return false;
  if (mode === 'direct') return true;
  if (process.platform !== 'linux') return false;
  if (writeBytes !== undefined && writeBytes < DIRECT_MIN_WRITE_BYTES) return false;
  try {
    return LOCAL_DISK_FILE_SYSTEMS.has(statfsSync(dirname(path)).type);
  } catch {
    return false;
  }
}
