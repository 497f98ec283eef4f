// Requests made while something is being dragged: at most one in flight and
// one waiting, and the waiting one is always the newest. A slow answer never
// piles up a queue of stale requests, and the last value asked for is always
// answered. Knows nothing about the API, the page or plotting.

/**
 * @template P, R
 */
export class LatestOnly {
  /**
   * @param {(params: P) => Promise<R>} run makes the request
   * @param {(result: R, params: P) => void} done receives answers that are still wanted
   * @param {(error: unknown, params: P) => void} failed
   */
  constructor(run, done, failed) {
    this.run = run;
    this.done = done;
    this.failed = failed;
    this.busy = false;
    /** @type {{params: P} | null} */
    this.waiting = null;
    /** Bumped by `forget`, so answers to older requests are dropped. */
    this.generation = 0;
  }

  /**
   * Asks for `params`; replaces whatever was waiting.
   * @param {P} params
   */
  request(params) {
    if (this.busy) {
      this.waiting = { params };
      return;
    }
    void this.start(params);
  }

  /** Drops the waiting request and ignores the answer of the one in flight. */
  forget() {
    this.waiting = null;
    this.generation += 1;
  }

  /** @param {P} params */
  async start(params) {
    this.busy = true;
    const generation = this.generation;
    try {
      const result = await this.run(params);
      // Shown even when a newer request waits: while a slider moves, every
      // answer is fresher than the one on screen, and the readout names the
      // value it belongs to.
      if (generation === this.generation) this.done(result, params);
    } catch (e) {
      if (generation === this.generation && this.waiting === null) this.failed(e, params);
    } finally {
      this.busy = false;
      const next = this.waiting;
      this.waiting = null;
      if (next !== null) void this.start(next.params);
    }
  }
}
