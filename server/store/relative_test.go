package store

import (
	"context"
	"testing"
)

// TestOpenRelativePath opens the store by a relative folder, as the
// service's default --data-dir ./midsag-data does.
func TestOpenRelativePath(t *testing.T) {
	t.Chdir(t.TempDir())
	s, err := Open("./midsag-data", Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if err := s.Ping(context.Background()); err != nil {
		t.Fatal(err)
	}
}
