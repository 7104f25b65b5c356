/**
 * What happens when the process is interrupted (SIGINT from Ctrl-C, SIGTERM from a scheduler): the
 * work that holds something on disk — a folder lock, an incomplete manifest — registers a handler
 * here, and the CLI runs them all (newest first) before it prints one line and exits. A handler must
 * be quick and synchronous: the process ends right after.
 */

/** A handler: receives the signal's name (`SIGTERM`). */
export type InterruptHandler = (signal: string) => void;

const handlers: InterruptHandler[] = [];

/**
 * Registers `handler` to run on an interruption.
 * @returns a function that unregisters it (safe to call twice); call it when the work is done.
 */
export function onInterrupt(handler: InterruptHandler): () => void {
  handlers.push(handler);
  return () => {
    const at = handlers.lastIndexOf(handler);
    if (at >= 0) handlers.splice(at, 1);
  };
}

/**
 * Runs every registered handler, newest first (a manifest is marked before its folder's lock is
 * released), each at most once; a failing handler does not stop the others.
 */
export function runInterruptHandlers(signal: string): void {
  while (handlers.length > 0) {
    const handler = handlers.pop()!;
    try {
      handler(signal);
    } catch {
      // the process is ending; the next handler still runs
    }
  }
}
