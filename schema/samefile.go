package schema

import (
	"os"
	"path/filepath"
)

// Clobbers reports whether writing to out would write over the warehouse
// file db or its write-ahead log db.wal: the same file reached by another
// name, a symbolic link (also one whose target does not exist yet) or a hard
// link (os.SameFile compares device and inode), or, for a file not there
// yet, the same resolved path.
func Clobbers(out, db string) bool {
	if out == "" || db == "" {
		return false
	}
	targets := []string{db, db + ".wal"}
	if st, err := os.Stat(out); err == nil {
		for _, p := range targets {
			if pt, err := os.Stat(p); err == nil && os.SameFile(st, pt) {
				return true
			}
		}
	}
	o := resolve(out)
	for _, p := range targets {
		if o == resolve(p) {
			return true
		}
	}
	return false
}

// resolve returns path made absolute with its symbolic links followed as
// far as they exist (a dangling link is followed to its target's name).
func resolve(path string) string {
	abs, err := filepath.Abs(path)
	if err != nil {
		return filepath.Clean(path)
	}
	for i := 0; i < 40; i++ { // a link loop ends here
		if r, err := filepath.EvalSymlinks(abs); err == nil {
			return r
		}
		fi, err := os.Lstat(abs)
		if err != nil || fi.Mode()&os.ModeSymlink == 0 {
			// Missing: resolve the folder, keep the name.
			if d, err := filepath.EvalSymlinks(filepath.Dir(abs)); err == nil {
				return filepath.Join(d, filepath.Base(abs))
			}
			return abs
		}
		target, err := os.Readlink(abs)
		if err != nil {
			return abs
		}
		if !filepath.IsAbs(target) {
			target = filepath.Join(filepath.Dir(abs), target)
		}
		abs = filepath.Clean(target)
	}
	return abs
}
