package grad

import "math/rand"

// moreCases are the finite-difference cases of the structural operators.
func moreCases(r *rand.Rand) []fdCase {
	return nil
}
