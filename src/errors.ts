/**
 * Error classes. Every error Sonde raises on purpose carries a stable `code`, names the offending input
 * and, where one exists, a `hint` that says how to fix it. The CLI prints `message` (plus the hint) on
 * one line; only `--verbose` shows a stack.
 */

/** Base class of every deliberate Sonde error. */
export class SondeError extends Error {
  /** Stable machine-readable code, e.g. `E_MODEL_READ`. */
  readonly code: string;
  /** How to fix it, or undefined when there is nothing to suggest. */
  readonly hint: string | undefined;
  /** Process exit code the CLI uses: 2 for usage errors, 1 for runtime errors. */
  readonly exitCode: 1 | 2;

  constructor(code: string, message: string, options: { hint?: string; exitCode?: 1 | 2; cause?: unknown } = {}) {
    super(message, options.cause === undefined ? undefined : { cause: options.cause });
    this.name = new.target.name;
    this.code = code;
    this.hint = options.hint;
    this.exitCode = options.exitCode ?? 1;
  }
}

/** The user asked for something malformed (bad option, bad spec, unknown name). Exit code 2. */
export class UsageError extends SondeError {
  constructor(code: string, message: string, options: { hint?: string; cause?: unknown } = {}) {
    super(code, message, { ...options, exitCode: 2 });
  }
}

/** Something failed while doing valid work (unreadable file, runtime failure, disk full). Exit code 1. */
export class RuntimeFailure extends SondeError {
  constructor(code: string, message: string, options: { hint?: string; cause?: unknown } = {}) {
    super(code, message, { ...options, exitCode: 1 });
  }
}

/**
 * Names from `candidates` closest to `name` (Levenshtein distance, then shared prefix), at most `limit`.
 * Used to build "closest: ..." hints. Empty candidates give an empty list.
 */
export function closestNames(name: string, candidates: readonly string[], limit = 3): string[] {
  const lower = name.toLowerCase();
  const scored = candidates.map((candidate) => {
    const c = candidate.toLowerCase();
    let score = levenshtein(lower, c);
    if (c.includes(lower) || lower.includes(c)) score = Math.min(score, Math.abs(c.length - lower.length) * 0.5);
    return { candidate, score };
  });
  scored.sort((a, b) => a.score - b.score || a.candidate.localeCompare(b.candidate));
  return scored.slice(0, limit).map((s) => s.candidate);
}

/** A list of names for a one-line message: all of them up to `limit`, else the first `limit`, "…" and the count (a readout may have 1000 units). */
export function nameList(names: readonly string[], limit = 8): string {
  return names.length <= limit ? names.join(', ') : `${names.slice(0, limit).join(', ')}, … (${names.length} in all)`;
}

/**
 * The first difference between two category lists compared as sets, in words (`"dog" is in A but not in
 * B`), or null when they hold the same names.
 */
export function firstDifference(a: readonly string[], b: readonly string[], nameA: string, nameB: string): string | null {
  const inB = new Set(b);
  const missing = a.find((x) => !inB.has(x));
  if (missing !== undefined) return `"${missing}" is in ${nameA} but not in ${nameB}`;
  const inA = new Set(a);
  const extra = b.find((x) => !inA.has(x));
  if (extra !== undefined) return `"${extra}" is in ${nameB} but not in ${nameA}`;
  return null;
}

/** `closest: "a", "b"` or an empty string; for appending to messages. */
export function closestHint(name: string, candidates: readonly string[], limit = 3): string {
  const near = closestNames(name, candidates, limit);
  return near.length === 0 ? '' : `closest: ${near.map((n) => JSON.stringify(n)).join(', ')}`;
}

function levenshtein(a: string, b: string): number {
  const row = new Array<number>(b.length + 1);
  for (let j = 0; j <= b.length; j++) row[j] = j;
  for (let i = 1; i <= a.length; i++) {
    let diagonal = row[0]!;
    row[0] = i;
    for (let j = 1; j <= b.length; j++) {
      const above = row[j]!;
      row[j] = Math.min(above + 1, row[j - 1]! + 1, diagonal + (a[i - 1] === b[j - 1] ? 0 : 1));
      diagonal = above;
    }
  }
  return row[b.length]!;
}
