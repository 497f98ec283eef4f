// A small undo and redo history of hand-made moves (the collapse sliders and
// the fit windows). Each entry is a whole state, so undoing restores it
// exactly. Knows nothing about the API, the page or plotting.

/**
 * @template S
 */
export class History {
  /**
   * @param {S} initial
   * @param {(a: S, b: S) => boolean} same whether two states are equal
   * @param {number} [limit] most states kept
   */
  constructor(initial, same, limit = 50) {
    /** @type {S[]} */
    this.past = [];
    /** @type {S[]} */
    this.future = [];
    this.current = initial;
    this.same = same;
    this.limit = limit;
  }

  /**
   * Records a settled state (the end of a drag, a typed value, a best fit).
   * @param {S} state
   */
  commit(state) {
    if (this.same(state, this.current)) return;
    this.past.push(this.current);
    if (this.past.length > this.limit) this.past.shift();
    this.current = state;
    this.future = [];
  }

  /**
   * Replaces the current state without making a step (a new dataset starts
   * a new history).
   * @param {S} state
   */
  reset(state) {
    this.past = [];
    this.future = [];
    this.current = state;
  }

  /** @returns {S | null} the state to go back to, or null when none */
  undo() {
    const previous = this.past.pop();
    if (previous === undefined) return null;
    this.future.push(this.current);
    this.current = previous;
    return previous;
  }

  /** @returns {S | null} */
  redo() {
    const next = this.future.pop();
    if (next === undefined) return null;
    this.past.push(this.current);
    this.current = next;
    return next;
  }

  get canUndo() {
    return this.past.length > 0;
  }

  get canRedo() {
    return this.future.length > 0;
  }
}
