/**
 * max |got − want| over max |want|: the error measure of the checks against PyTorch (one scale for the
 * whole tensor, so values near zero do not blow it up). Throws when the lengths differ.
 */
export function maxRelativeError(got: ArrayLike<number>, want: ArrayLike<number>): number {
  if (got.length !== want.length) throw new RangeError(`maxRelativeError: ${got.length} values against ${want.length}`);
  let diff = 0;
  let scale = 0;
  for (let i = 0; i < want.length; i++) {
    diff = Math.max(diff, Math.abs(got[i]! - want[i]!));
    scale = Math.max(scale, Math.abs(want[i]!));
  }
  return diff / scale;
}
