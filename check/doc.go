// Package check runs the health check of a trained ONNX model on a sample
// of data, and the comparison of two checkpoints, from a Go program; the
// vitals command is a thin layer of flags and writers over it.
//
// Data flow: Load reads the model (loader) and compiles it into a plan of
// kernels (probe). Check matches Sample.Data to the model's inputs,
// checking dtypes and shapes before anything runs, and cuts the sample into
// batches (Sample.Batch, the batch size the model fixes, or one sample
// first and then as many as fit 192 MiB of node outputs, at most 32). A reader
// goroutine decodes the next batch while the current one runs; the plan
// calls a hook after every node, which hands the node's outputs to the
// statistics collector (stats): moments, histograms, dead and saturated
// fractions per layer. Activation buffers come from the run's own
// tensor.Arena (memory budget and buffer pool); a value whose last reader
// has run goes back to the pool once the collector is done with it. After
// the last batch the collector's statistics go through the health checks
// (stats.Checks, with Options.Thresholds), which rank their findings into
// one report.Report, the value every writer (text, JSON, Markdown, HTML,
// plots) renders. Compare runs two models over the same batches and diffs
// their statistics into the newer one's report.
//
// With Options.Gradients, Check also runs the backward pass (package grad)
// after each batch: the hook records the batch's values on a tape (no
// storage is recycled within the batch), the loss's gradient at the first
// output is propagated back to every weight and activation, and the sums
// over batches (scaled by 1/N) become grad_rms, grad_norm and the update
// ratios on the report, before the checks run (docs/gradients.md).
//
// A run keeps all of its state (buffer pool, memory budget, progress,
// cancellation through its context) to itself, so several runs may go side
// by side in one process. Processor threads are shared: kernels split work
// over GOMAXPROCS through one process-wide worker pool.
package check
