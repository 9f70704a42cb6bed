//go:build race

package gemm

// raceEnabled skips allocation counts, which the race detector changes.
const raceEnabled = true
