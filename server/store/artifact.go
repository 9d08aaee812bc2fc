package store

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"regexp"

	"github.com/midsag/midsag/internal/atomicfile"
)

// artifactName limits artifact names to plain file names, so a name can
// never leave the record's folder.
var artifactName = regexp.MustCompile(`^[a-z0-9][a-z0-9._-]{0,63}$`)

// recordID is the form CreateRecord gives ids (32 hex characters).
var recordID = regexp.MustCompile(`^[0-9a-f]{32}$`)

func (s *Store) artifactPath(id, name string) (string, error) {
	if !recordID.MatchString(id) || !artifactName.MatchString(name) {
		return "", fmt.Errorf("artifact %q of record %q: %w", name, id, ErrNotFound)
	}
	return filepath.Join(s.dir, "results", id, name), nil
}

// WriteArtifact stores a file made for a record, such as its heatmap,
// durably: temporary file, fsync, rename, directory fsync.
func (s *Store) WriteArtifact(id, name string, data []byte) error {
	p, err := s.artifactPath(id, name)
	if err != nil {
		return err
	}
	dir := filepath.Dir(p)
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return fmt.Errorf("store: artifact folder: %w", err)
	}
	if err := atomicfile.WriteFile(p, data, atomicfile.Perm(0o640)); err != nil {
		return fmt.Errorf("store: write artifact %s: %w", name, err)
	}
	return nil
}

// ReadArtifact returns a record's artifact, or ErrNotFound.
func (s *Store) ReadArtifact(id, name string) ([]byte, error) {
	p, err := s.artifactPath(id, name)
	if err != nil {
		return nil, err
	}
	b, err := os.ReadFile(p)
	if errors.Is(err, os.ErrNotExist) {
		return nil, fmt.Errorf("artifact %s of record %s: %w", name, id, ErrNotFound)
	}
	return b, err
}
