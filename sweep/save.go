package sweep

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
)

// SaveSession writes s to path atomically: the JSON goes to a temporary
// file in the same directory, which is synced and renamed over path, and
// the directory is synced; a crash at any moment leaves either the old
// file or the new one, never a torn one.
func SaveSession(path string, s *Session) error {
	data, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return fmt.Errorf("encode session for %s: %w", path, err)
	}
	return writeAtomic(path, append(data, '\n'))
}

func writeAtomic(path string, data []byte) error {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("save %s: %w", path, err)
	}
	tmp := f.Name()
	ok := false
	defer func() {
		if !ok {
			f.Close()
			os.Remove(tmp)
		}
	}()
	if _, err := f.Write(data); err != nil {
		return fmt.Errorf("save %s: write: %w", path, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("save %s: sync: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("save %s: close: %w", path, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("save %s: rename: %w", path, err)
	}
	ok = true
	if d, err := os.Open(dir); err == nil {
		d.Sync() // best effort: some file systems refuse to sync a directory
		d.Close()
	}
	return nil
}
