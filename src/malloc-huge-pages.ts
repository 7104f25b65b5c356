/**
 * glibc's malloc backed by transparent huge pages, for processes Sonde starts. `bin/sonde` sets the same
 * tunable in its shell lines before Node.js starts (glibc reads GLIBC_TUNABLES once, at process start, so
 * a running process cannot turn it on for itself).
 *
 * Why: a recording allocates and frees hundreds of MB of tensors a batch (the runtime's outputs, the
 * copies handed to JavaScript, the Arrow buffers); glibc serves blocks that large with fresh mmap pages
 * and returns them on free, so every batch pays a kernel page fault per 4 KiB page on first touch. With
 * `glibc.malloc.hugetlb=1` (glibc ≥ 2.35) malloc asks for transparent huge pages (madvise), one fault per
 * 2 MiB. Where glibc is older, not glibc, or the kernel's transparent huge pages are `never`, the
 * setting does nothing.
 */
import { readFileSync } from 'node:fs';

/** The GLIBC_TUNABLES entry Sonde adds. */
export const HUGE_PAGE_TUNABLE = 'glibc.malloc.hugetlb=1';

/**
 * `env` with `glibc.malloc.hugetlb=1` appended to GLIBC_TUNABLES, unless it already sets
 * glibc.malloc.hugetlb (to anything: `=0` is how a user turns it off) — the rule of `bin/sonde`'s shell
 * lines. A new object; `env` is not changed.
 */
export function withHugePageMalloc(env: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  const tunables = env['GLIBC_TUNABLES'] ?? '';
  if (hugePageSetting(env) !== undefined) return { ...env };
  return { ...env, GLIBC_TUNABLES: tunables === '' ? HUGE_PAGE_TUNABLE : `${tunables}:${HUGE_PAGE_TUNABLE}` };
}

/** `env` with glibc.malloc.hugetlb set to `on` (1) or off (0), replacing any setting of it. */
export function withHugePageSetting(on: boolean, env: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  const kept = (env['GLIBC_TUNABLES'] ?? '').split(':').filter((entry) => entry !== '' && !entry.startsWith('glibc.malloc.hugetlb='));
  return { ...env, GLIBC_TUNABLES: [...kept, `glibc.malloc.hugetlb=${on ? 1 : 0}`].join(':') };
}

/** The value GLIBC_TUNABLES gives glibc.malloc.hugetlb in `env` (the last one), or undefined where it sets none. */
export function hugePageSetting(env: NodeJS.ProcessEnv = process.env): string | undefined {
  const entries = (env['GLIBC_TUNABLES'] ?? '').split(':').filter((entry) => entry.startsWith('glibc.malloc.hugetlb='));
  return entries.at(-1)?.slice('glibc.malloc.hugetlb='.length);
}

/** The kernel's transparent huge page mode (`always`, `madvise` or `never`), or null where it cannot be read. */
export function transparentHugePageMode(): string | null {
  try {
    return /\[(\w+)\]/.exec(readFileSync('/sys/kernel/mm/transparent_hugepage/enabled', 'utf8'))?.[1] ?? null;
  } catch {
    return null;
  }
}
