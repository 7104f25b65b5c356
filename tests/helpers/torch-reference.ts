import { execFileSync } from 'node:child_process';
import { existsSync } from 'node:fs';

/** Runs `script` under Debian's /usr/bin/python3 (which has torch) with `input` as JSON on stdin; null when unavailable. */
export function torchReference(script: string, input: unknown): unknown {
  if (!existsSync('/usr/bin/python3')) return null;
  try {
    return JSON.parse(execFileSync('/usr/bin/python3', ['-c', script], { input: JSON.stringify(input), encoding: 'utf8', timeout: 60_000 })) as unknown;
  } catch {
    return null;
  }
}

/** Whether Debian's PyTorch answers (tests that compare against it skip otherwise). */
export const TORCH = torchReference('import json, torch; print(json.dumps(1))', null) === 1;
