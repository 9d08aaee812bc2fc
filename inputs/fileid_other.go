//go:build !unix

package inputs

import (
	"io/fs"
	"path/filepath"
)

// fileID identifies a folder by its absolute path with links resolved.
func fileID(path string, _ fs.FileInfo) any {
	real, err := filepath.EvalSymlinks(path)
	if err != nil {
		return path
	}
	abs, _ := filepath.Abs(real)
	return abs
}
