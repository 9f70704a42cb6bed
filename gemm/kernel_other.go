//go:build !amd64

package gemm

func availableKernels() []*kernel { return []*kernel{genericKernel} }
