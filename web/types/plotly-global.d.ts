// The part of the vendored plotly.js API (web/vendor/plotly, v4.1.2) that
// web/js/plot.js calls. plotly.min.js is a classic script defining the global
// `Plotly`; only plot.js may touch it. Traces, layouts and configs are plain
// objects built in plot.js, so they are typed loosely here on purpose: the
// declaration checks that the entry points are called with the right
// arguments, not plotly's whole attribute schema.

type PlotlyObject = Record<string, unknown>;

interface PlotlyStatic {
  /** Draws or updates a plot in place, reusing what it can. */
  react(
    root: HTMLElement,
    data: PlotlyObject[],
    layout?: PlotlyObject,
    config?: PlotlyObject,
  ): Promise<HTMLElement>;
  /** Removes a plot and its event listeners from an element. */
  purge(root: HTMLElement): void;
  Plots: {
    /** Fits a plot to its container's current size. */
    resize(root: HTMLElement): Promise<void> | void;
  };
}

declare const Plotly: PlotlyStatic;
