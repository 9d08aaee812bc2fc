// Package ortest starts ONNX Runtime for tests outside package models: it
// finds the library as the binary does (models.FindLibrary) and skips the
// test when it is missing, or fails it when MIDSAG_REQUIRE_TOOLS=1.
package ortest

import (
	"testing"

	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/models"
)

// Init finds and initialises ONNX Runtime or skips/fails t.
func Init(t testing.TB) {
	t.Helper()
	lib, err := models.FindLibrary("")
	if err == nil {
		err = models.Init(lib)
	}
	if err != nil {
		if testtool.Required() {
			t.Fatalf("ONNX Runtime required: %v", err)
		}
		t.Skipf("ONNX Runtime not available: %v", err)
	}
}
