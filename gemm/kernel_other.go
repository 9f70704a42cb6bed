//go:build !amd64

package gemm

func availableKernels() []*kernel { return []*kernel{genericKernel} }

// widerFor: one kernel width only on other architectures.
func widerFor(k *kernel, n int) *kernel { return k }
