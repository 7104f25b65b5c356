import cliProgress from 'cli-progress';

/** A progress bar on stderr when it is a terminal; a no-op otherwise (logs and CI stay clean). */
export interface ProgressBar {
  update(done: number, total: number, detail?: string): void;
  stop(): void;
}

/** Creates a bar labelled `label`; silent unless stderr is a TTY. */
export function createProgressBar(label: string): ProgressBar {
  if (!process.stderr.isTTY) return { update() {}, stop() {} };
  const bar = new cliProgress.SingleBar(
    { format: `${label} [{bar}] {value}/{total} {detail} eta {eta_formatted}`, stream: process.stderr, hideCursor: true, clearOnComplete: true },
    cliProgress.Presets.shades_classic,
  );
  let started = false;
  return {
    update(done, total, detail = '') {
      if (!started) {
        bar.start(total, done, { detail });
        started = true;
      } else bar.update(done, { detail });
    },
    stop() {
      if (started) bar.stop();
    },
  };
}
