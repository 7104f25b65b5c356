import { readFileSync } from 'node:fs';

/** Sonde's own version, read from package.json once. */
export const TOOL_VERSION: string = (
  JSON.parse(readFileSync(new URL('../package.json', import.meta.url), 'utf8')) as { version: string }
).version;
