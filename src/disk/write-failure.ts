/**
 * How a failed write is told: one line naming the file and the reason (a full disk, a permission), and
 * the shape of the test hooks that make writes fail on purpose.
 */
import { RuntimeFailure } from '../errors.js';

/**
 * A fault to inject into every sink write: returns an error to throw (e.g. one with code ENOSPC) or null.
 * Receives the temporary path, the bytes already in the file and the size of the write.
 */
export type WriteFault = (path: string, byteOffset: number, byteLength: number) => NodeJS.ErrnoException | null;

/** Turns a file-system error into a one-line RuntimeFailure naming the file. */
export function writeFailure(path: string, error: unknown): RuntimeFailure {
  const code = (error as NodeJS.ErrnoException).code;
  const reason = code === 'ENOSPC' ? 'the disk is full' : code === 'EACCES' || code === 'EPERM' ? 'permission denied' : (error as Error).message;
  return new RuntimeFailure('E_WRITE', `cannot write ${path}: ${reason}`, { cause: error });
}
