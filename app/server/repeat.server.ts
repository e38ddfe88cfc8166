/** A job the server repeats; `stop` waits for a pass that is running. */
export interface Repeating {
  stop(): Promise<void>;
}

/**
 * Runs `pass` first after `firstRunDelayMs`, then `intervalMs` after each pass ends, so passes
 * never overlap. `pass` must not throw: it logs its own failures. `stop` clears the timer,
 * aborts the signal handed to `pass` (a long pass may stop between steps) and waits for a
 * running pass. The timers are unref'd, so they never keep the process alive by themselves.
 * An interval of 0 or less runs nothing.
 */
export function repeatEvery(intervalMs: number, firstRunDelayMs: number, pass: (signal: AbortSignal) => Promise<void>): Repeating {
  const stopping = new AbortController();
  let timer: NodeJS.Timeout | undefined;
  let running: Promise<void> | undefined;

  const schedule = (delayMs: number) => {
    timer = setTimeout(run, delayMs);
    timer.unref();
  };

  function run(): void {
    running = pass(stopping.signal).finally(() => {
      running = undefined;
      if (!stopping.signal.aborted) schedule(intervalMs);
    });
  }

  if (intervalMs > 0) schedule(firstRunDelayMs);
  return {
    async stop() {
      stopping.abort();
      clearTimeout(timer);
      await running;
    },
  };
}
