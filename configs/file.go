package configs

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"syscall"
)

// MaxFileSize is the largest configuration or recipe file read (1 MiB). The
// largest recipe allowed (recipe.MaxSteps steps) fits in far less.
const MaxFileSize = 1 << 20

// ReadFile reads a configuration file of at most MaxFileSize bytes. It opens
// the file non-blocking and checks what it opened with fstat, so a FIFO or a
// device given by mistake is refused at once instead of blocking or being
// read without end. Errors name the file and never quote its content.
func ReadFile(path string) ([]byte, error) { return readFile(path, 0) }

// ReadFileNoFollow is ReadFile for files put where anyone may write (the
// watched folder): a symbolic link is refused, never followed.
func ReadFileNoFollow(path string) ([]byte, error) { return readFile(path, syscall.O_NOFOLLOW) }

func readFile(path string, flags int) ([]byte, error) {
	fd, err := syscall.Open(path, syscall.O_RDONLY|syscall.O_NONBLOCK|syscall.O_CLOEXEC|flags, 0)
	if err != nil {
		if flags&syscall.O_NOFOLLOW != 0 && errors.Is(err, syscall.ELOOP) {
			return nil, fmt.Errorf("%s: %s", path, NotRegular(fs.ModeSymlink, 0))
		}
		return nil, &fs.PathError{Op: "open", Path: path, Err: err}
	}
	f := os.NewFile(uintptr(fd), path)
	defer f.Close()
	fi, err := f.Stat() // what was opened, not what the name points to now
	if err != nil {
		return nil, err
	}
	if why := NotRegular(fi.Mode(), fi.Size()); why != "" {
		return nil, fmt.Errorf("%s: %s", path, why)
	}
	data, err := io.ReadAll(io.LimitReader(f, MaxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if len(data) > MaxFileSize {
		return nil, fmt.Errorf("%s: grew beyond the 1 MiB a configuration or recipe file may have while it was read", path)
	}
	return data, nil
}

// NotRegular says why a file of this mode (as lstat or fstat gives it) and
// size is not read as a configuration or recipe file, or "" when it is.
func NotRegular(m fs.FileMode, size int64) string {
	switch {
	case m&fs.ModeSymlink != 0:
		return "not a regular file but a symbolic link: links are not followed here; copy the file in"
	case m&fs.ModeNamedPipe != 0:
		return "not a regular file but a FIFO (named pipe): only regular files are read"
	case m&fs.ModeDevice != 0:
		return "not a regular file but a device: only regular files are read"
	case m&fs.ModeSocket != 0:
		return "not a regular file but a socket: only regular files are read"
	case !m.IsRegular():
		return fmt.Sprintf("not a regular file (%s): only regular files are read", m.Type())
	case size > MaxFileSize:
		return tooLarge(size)
	}
	return ""
}

func tooLarge(size int64) string {
	return fmt.Sprintf("%d bytes (%.1f MiB), larger than the 1 MiB a configuration or recipe file may have", size, float64(size)/(1<<20))
}
