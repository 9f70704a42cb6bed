//go:build !(linux || darwin || freebsd)

package loader

import "os"

// withFileBytes calls use with the bytes of the file at path.
func withFileBytes(path string, use func([]byte) error) error {
	b, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	return use(b)
}

// releaseRead does nothing where files are read into memory, not mapped.
func releaseRead(p []byte) {}
