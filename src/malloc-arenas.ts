/**
 * One glibc malloc arena for all threads, for processes Sonde starts. `bin/sonde` sets the same tunable
 * in its shell lines before Node.js starts (glibc reads GLIBC_TUNABLES once, at process start, so a
 * running process cannot set it for itself).
 *
 * Why: glibc gives threads arenas of their own, and memory freed in one arena is reused only by the
 * threads allocating from it. The model inspection's probe runs free about 1 GB on their threads; with
 * an arena per thread the recording's worker thread sometimes allocated anew beside it, and a ViT-B/16
 * record peaked anywhere between 2.26 and 2.94 GB (above its bound of 1.5 × bare inference + 512 MB);
 * with one arena, 2.25 GB in 16 of 16 records and no slower (README, Performance). Recording allocates few,
 * large blocks, so the one arena's lock is not contended. Where the C library is not glibc, the setting
 * does nothing.
 */

/** The GLIBC_TUNABLES entry Sonde adds. */
export const ARENA_TUNABLE = 'glibc.malloc.arena_max=1';

/** The value GLIBC_TUNABLES gives glibc.malloc.arena_max in `env` (the last one), or undefined where it sets none. */
export function arenaSetting(env: NodeJS.ProcessEnv = process.env): string | undefined {
  const entries = (env['GLIBC_TUNABLES'] ?? '').split(':').filter((entry) => entry.startsWith('glibc.malloc.arena_max='));
  return entries.at(-1)?.slice('glibc.malloc.arena_max='.length);
}

/**
 * `env` with `glibc.malloc.arena_max=1` appended to GLIBC_TUNABLES, unless it already sets
 * glibc.malloc.arena_max (to anything: a user's own choice stays) — the rule of `bin/sonde`'s shell
 * lines. A new object; `env` is not changed.
 */
export function withSondeMalloc(env: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  const tunables = env['GLIBC_TUNABLES'] ?? '';
  if (arenaSetting(env) !== undefined) return { ...env };
  return { ...env, GLIBC_TUNABLES: tunables === '' ? ARENA_TUNABLE : `${tunables}:${ARENA_TUNABLE}` };
}
