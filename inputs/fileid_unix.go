//go:build unix

package inputs

import (
	"io/fs"
	"path/filepath"
	"syscall"
)

// fileID identifies a folder by device and inode, so two paths to one
// folder (links, bind mounts) are recognised.
func fileID(path string, info fs.FileInfo) any {
	if st, ok := info.Sys().(*syscall.Stat_t); ok {
		return [2]uint64{uint64(st.Dev), uint64(st.Ino)}
	}
	real, err := filepath.EvalSymlinks(path)
	if err != nil {
		return path
	}
	abs, _ := filepath.Abs(real)
	return abs
}
