package engine

import (
	"encoding/gob"
	"fmt"
	"os"
	"path/filepath"

	"hystd/acq/record"
)

// spool writes a loop the store refused, gob-encoded (NaN channels survive,
// which JSON cannot carry), into dir (created if
// needed), synced to disk, and returns the file's path. ReadSpool reads it back.
func spool(dir string, l record.Loop) (string, error) {
	if dir == "" {
		dir = "."
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", err
	}
	name := filepath.Join(dir, fmt.Sprintf("%s-loop%03d.gob", l.RunID, l.N))
	f, err := os.CreateTemp(dir, ".spool-*")
	if err != nil {
		return "", err
	}
	defer os.Remove(f.Name())
	if err := gob.NewEncoder(f).Encode(l); err != nil {
		f.Close()
		return "", err
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return "", err
	}
	if err := f.Close(); err != nil {
		return "", err
	}
	return name, os.Rename(f.Name(), name)
}

// ReadSpool reads a loop spooled by a run whose store was down, for a later
// Writer.AddLoop.
func ReadSpool(path string) (record.Loop, error) {
	var l record.Loop
	f, err := os.Open(path)
	if err != nil {
		return l, err
	}
	defer f.Close()
	if err := gob.NewDecoder(f).Decode(&l); err != nil {
		return l, fmt.Errorf("%s: %w", path, err)
	}
	return l, nil
}
