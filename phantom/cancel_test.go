package phantom

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// TestGenerateContextCancelled: a cancelled run returns the context's
// error and writes no labels.csv or truth.json, which describe complete
// cohorts only.
func TestGenerateContextCancelled(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	dir := t.TempDir()
	_, err := GenerateContext(ctx, dir, Options{Studies: 50, Seed: 1, NoDecoys: true})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v, want context.Canceled", err)
	}
	for _, name := range []string{"labels.csv", "truth.json"} {
		if _, err := os.Stat(filepath.Join(dir, name)); err == nil {
			t.Errorf("%s written for a cancelled run", name)
		}
	}
}
