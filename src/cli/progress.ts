import cliProgress from 'cli-progress';

/** A progress bar on stderr when it is a terminal; a no-op otherwise (logs and CI stay clean). */
export interface ProgressBar {
  /** Sets the bar to `done` of `total` (the total may change between calls, e.g. as sites are added up). */
  update(done: number, total: number, detail?: string): void;
  stop(): void;
}

/**
 * A duration in seconds as "45s", "10m05s" or "1h02m": whole seconds are rounded once, before they are
 * split, so 659.6 s reads "11m00s" (never "10m60s"); "–" for a negative or non-finite value.
 */
export function formatDuration(seconds: number): string {
  if (!Number.isFinite(seconds) || seconds < 0) return '–';
  const whole = Math.round(seconds);
  const hours = Math.floor(whole / 3600);
  const minutes = Math.floor((whole % 3600) / 60);
  const rest = whole % 60;
  if (hours > 0) return `${hours}h${String(minutes).padStart(2, '0')}m`;
  if (minutes > 0) return `${minutes}m${String(rest).padStart(2, '0')}s`;
  return `${rest}s`;
}

/** Creates a bar labelled `label`; silent unless stderr is a TTY. The estimate of the time left is ours (`formatDuration`). */
export function createProgressBar(label: string): ProgressBar {
  if (!process.stderr.isTTY) return { update() {}, stop() {} };
  const bar = new cliProgress.SingleBar(
    { format: `${label} [{bar}] {value}/{total} {detail} {left}`, stream: process.stderr, hideCursor: true, clearOnComplete: true },
    cliProgress.Presets.shades_classic,
  );
  let started = 0;
  let shownTotal = -1;
  return {
    update(done, total, detail = '') {
      const now = performance.now();
      if (started === 0) {
        started = now;
        shownTotal = total;
        bar.start(total, done, { detail, left: '' });
        return;
      }
      if (total !== shownTotal) {
        bar.setTotal(total);
        shownTotal = total;
      }
      const elapsed = (now - started) / 1000;
      const left = done > 0 && done < total ? `about ${formatDuration((elapsed * (total - done)) / done)} left` : '';
      bar.update(done, { detail, left });
    },
    stop() {
      if (started !== 0) bar.stop();
    },
  };
}
