// Package plots renders the PNG figures of a vitals report for code review.
//
// Every figure is made in two steps: a *Spec function turns the report into a
// plain specification (series of finite points, axis ranges, titles, labels),
// which the tests check without looking at pixels, and a renderer draws that
// specification with gonum.org/v1/plot. The figures only read report.Report;
// NaN and ±Inf values are filtered out while the specification is built.
//
// Render draws the figures in memory, several at once, for the report
// writers (which embed or link them); WriteFiles writes them under --out.
// For a check report they are:
//   - depth-profile.png: activation mean ± std (or std on a log axis) and the
//     1st/99th percentiles of every activation layer along depth;
//   - unit-health.png: dead and saturated unit fractions per activation layer
//     against the warning and error thresholds;
//   - histograms-NN.png: a 4×4 grid per page of per-layer activation
//     histograms, worst-ranked layers first (DefaultHistogramPages pages
//     unless Options.All; a note counts the layers left out);
//   - weights.png: the gain std·√fan_in of every weight tensor against the
//     Xavier/Glorot (1) and He (√2) references;
//
// and, for a comparison (Report.Compare set):
//   - compare-histograms-NN.png: OLD and NEW histograms overlaid for the layers
//     that changed most;
//   - compare-depth-profile.png: both runs' activation std along depth.
//
// A figure with nothing to show is not drawn; Assets.Notes says which and why.
package plots
