// Package grad runs reverse mode over a graph that probe has executed: given
// every value of one batch (the tape) and the gradient of a scalar loss L
// with respect to some graph outputs, it computes dL/dv for every float
// value v upstream of them, initializers (the weights) included.
//
// Each operator family has a vector-Jacobian product (VJP) in its own file,
// registered in one table (vjp.go): given dL/dY for a node's outputs it
// returns dL/dX for its float inputs. Gradients are float64 slices in the
// row-major layout of the forward value they belong to, or float32 ones
// for float32 values between the rules that have a float32 path
// (grad32.go); forward values are read as float64 (float32 activations are
// widened, not recomputed) or in place in float32.
//
// The model is taken in inference mode: BatchNormalization uses its running
// mean and variance (constants: no gradient flows into them), Dropout is the
// identity. Every float initializer is a trainable parameter.
package grad
