// The part of the vendored plotly.js API (web/vendor/plotly, v4.1.1) that
// the figure modules call. plotly-scatter-heatmap.min.js is a classic script
// defining the global `Plotly` (loaded by plotcore.js's loadPlotting); only the
// figure modules (plot.js, plotcore.js, plotcollapse.js, plotpanels.js) touch it. Traces, layouts and configs are plain
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
  /** Changes layout attributes of a drawn plot. */
  relayout(root: HTMLElement, update: PlotlyObject): Promise<HTMLElement>;
  /** Removes a plot and its event listeners from an element. */
  purge(root: HTMLElement): void;
  /** Renders a drawn plot to an image file and offers it as a download. */
  downloadImage(
    root: HTMLElement,
    options: { format: "png" | "svg" | "jpeg" | "webp"; filename: string; width?: number; height?: number; scale?: number },
  ): Promise<string>;
  Plots: {
    /** Fits a plot to its container's current size. */
    resize(root: HTMLElement): Promise<void> | void;
  };
}

/** A drawn plot's element: plotly adds an event emitter to it. */
interface PlotlyElement extends HTMLElement {
  on(event: string, handler: (data: unknown) => void): void;
}

declare const Plotly: PlotlyStatic;
