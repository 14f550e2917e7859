package main

import (
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"

	"hystd/acq/daemon"
)

// writeAtomic writes data to path through a temporary file in the same
// folder, renamed into place only when complete. The file is created with
// mode 0666 less the process umask (0644 under the usual umask 022), as
// any other tool's output would be, so colleagues can read it.
func writeAtomic(path string, data []byte) error {
	var b [6]byte
	_, _ = rand.Read(b[:])
	tmp := filepath.Join(filepath.Dir(path), "."+filepath.Base(path)+"."+hex.EncodeToString(b[:]))
	f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o666)
	if err != nil {
		return err
	}
	if _, err := f.Write(data); err != nil {
		f.Close()
		os.Remove(tmp)
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(tmp)
		return err
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return err
	}
	return nil
}

// storePath finds the store file: the store.path of a daemon config when
// cfgPath is given, else DIR/hystd.db. The file must exist.
func storePath(dataDir, cfgPath string) (string, error) {
	db := filepath.Join(dataDir, "hystd.db")
	hint := "use --data DIR or --config FILE"
	if cfgPath != "" {
		cfg, err := daemon.Load(cfgPath)
		if err != nil {
			return "", err
		}
		db = cfg.Config.Store.Path
		hint = "store.path of " + cfgPath
	}
	if _, err := os.Stat(db); err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return "", fmt.Errorf("no store at %s (%s)", db, hint)
		}
		return "", err
	}
	return db, nil
}
