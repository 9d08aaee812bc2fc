package store

import (
	"context"
	"errors"
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

// TestOpenTwiceLocked: a second Open of the same folder fails while the
// first store is open and succeeds after it is closed (flock(2)
// semantics: the lock belongs to the open file description).
func TestOpenTwiceLocked(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Open(dir, Options{}); !errors.Is(err, ErrLocked) {
		t.Fatalf("second Open: %v, want ErrLocked", err)
	}
	s.Close()
	s2, err := Open(dir, Options{})
	if err != nil {
		t.Fatalf("Open after Close: %v", err)
	}
	s2.Close()
}
