// Package modeltest turns models built with internal/modelbuild into
// decoded models for tests.
package modeltest

import (
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
)

// Model serialises and decodes a built model, failing the test on an error.
func Model(t testing.TB, b *modelbuild.Builder) *loader.Model {
	t.Helper()
	data, err := b.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	m, err := loader.DecodeModel(data, "")
	if err != nil {
		t.Fatal(err)
	}
	return m
}
