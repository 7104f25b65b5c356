import { InvalidArgumentError } from 'commander';

/** commander parser for positive integers; the message names the option through commander. */
export function positiveInteger(value: string): number {
  const n = Number(value);
  if (!Number.isInteger(n) || n <= 0) throw new InvalidArgumentError(`"${value}" is not a positive integer.`);
  return n;
}

/** commander parser for non-negative integers. */
export function nonNegativeInteger(value: string): number {
  const n = Number(value);
  if (!Number.isInteger(n) || n < 0) throw new InvalidArgumentError(`"${value}" is not a non-negative integer.`);
  return n;
}

/** commander parser for finite numbers. */
export function finiteNumber(value: string): number {
  const n = Number(value);
  if (value.trim() === '' || !Number.isFinite(n)) throw new InvalidArgumentError(`"${value}" is not a number.`);
  return n;
}

/** Formats a byte count as MB with one decimal. */
export function megabytes(bytes: number): string {
  return `${(bytes / 1e6).toFixed(bytes < 1e5 ? 3 : 1)} MB`;
}

/**
 * commander parser for site lists, the one convention of every site option: comma-separated names, and
 * the option may be repeated (`--sites a,b --sites c` = a, b, c). An empty item is refused.
 */
export function siteList(value: string, previous: string[] | undefined): string[] {
  const items = value.split(',').map((s) => s.trim());
  if (items.some((s) => s === '')) throw new InvalidArgumentError(`"${value}" has an empty site name; separate site tensors with commas, e.g. a,b.`);
  return [...(previous ?? []), ...items];
}
