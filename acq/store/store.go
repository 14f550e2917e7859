package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"net/url"
	"os"
	"path/filepath"
	"time"

	"hystd/acq/record"

	_ "modernc.org/sqlite" // registers the "sqlite" driver
)

// ErrExists is returned when a run or loop is stored a second time.
var ErrExists = errors.New("already stored")

// Options tunes a Store; the zero value is the default.
type Options struct {
	// Now stamps outbox rows; nil means time.Now. Tests inject a clock.
	Now func() time.Time
	// ReadConns bounds the read pool; 0 means 4.
	ReadConns int
}

// Store is an open store file. Create it with Open, release it with Close.
type Store struct {
	path string
	w    *sql.DB // one connection, every write
	r    *sql.DB // read pool, query_only
	now  func() time.Time
}

var (
	_ record.Reader = (*Store)(nil)
	_ record.Writer = (*Store)(nil)
	_ Outbox        = (*Store)(nil)
)

// Open opens or creates the store file at path (its directory must exist)
// and brings its schema up to date. The caller closes the Store.
func Open(ctx context.Context, path string) (*Store, error) {
	return OpenWith(ctx, path, Options{})
}

// OpenWith is Open with options.
func OpenWith(ctx context.Context, path string, o Options) (*Store, error) {
	if path == "" {
		return nil, errors.New("store: empty path")
	}
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	if fi, err := os.Stat(filepath.Dir(abs)); err != nil || !fi.IsDir() {
		return nil, fmt.Errorf("store: %s: directory %s does not exist", path, filepath.Dir(abs))
	}
	s := &Store{path: abs, now: o.Now}
	if s.now == nil {
		s.now = time.Now
	}
	if err := registerBulk(); err != nil {
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	u := url.URL{Scheme: "file", Path: abs}
	q := "_pragma=busy_timeout(10000)&_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=foreign_keys(1)"
	s.w, err = sql.Open("sqlite", u.String()+"?"+q+"&_txlock=immediate")
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	s.w.SetMaxOpenConns(1)
	s.w.SetConnMaxIdleTime(0)
	if err := s.migrate(ctx); err != nil {
		s.w.Close()
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	s.r, err = sql.Open("sqlite", u.String()+"?_pragma=busy_timeout(10000)&_pragma=query_only(1)")
	if err != nil {
		s.w.Close()
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	n := o.ReadConns
	if n <= 0 {
		n = 4
	}
	s.r.SetMaxOpenConns(n)
	if err := s.r.PingContext(ctx); err != nil {
		s.Close()
		return nil, fmt.Errorf("store: %s: %w", path, err)
	}
	return s, nil
}

// Path returns the absolute path of the store file.
func (s *Store) Path() string { return s.path }

// Close closes both pools. Calls in flight may fail.
func (s *Store) Close() error {
	var errs []error
	if s.r != nil {
		errs = append(errs, s.r.Close())
	}
	if s.w != nil {
		errs = append(errs, s.w.Close())
	}
	return errors.Join(errs...)
}

// SchemaVersion is the schema version this build writes.
func SchemaVersion() int { return len(migrations) }

func (s *Store) migrate(ctx context.Context) error { return s.migrateTo(ctx, len(migrations)) }

// migrateTo brings the schema up to version upTo.
func (s *Store) migrateTo(ctx context.Context, upTo int) error {
	var mode string
	if err := s.w.QueryRowContext(ctx, "PRAGMA journal_mode").Scan(&mode); err != nil {
		return err
	}
	if mode != "wal" {
		return fmt.Errorf("journal mode is %q, want wal", mode)
	}
	var v int
	if err := s.w.QueryRowContext(ctx, "PRAGMA user_version").Scan(&v); err != nil {
		return err
	}
	if v > len(migrations) {
		return fmt.Errorf("schema version %d is newer than this build knows (%d): use a newer hystd", v, len(migrations))
	}
	for ; v < upTo; v++ {
		if err := s.apply(ctx, v); err != nil {
			return fmt.Errorf("migration %d: %w", v+1, err)
		}
	}
	return nil
}

// apply runs migration v in one transaction. Foreign keys are off while it
// runs (tables are rebuilt) and checked before the commit.
func (s *Store) apply(ctx context.Context, v int) error {
	conn, err := s.w.Conn(ctx)
	if err != nil {
		return err
	}
	defer conn.Close()
	if _, err := conn.ExecContext(ctx, "PRAGMA foreign_keys = OFF"); err != nil {
		return err
	}
	defer conn.ExecContext(context.WithoutCancel(ctx), "PRAGMA foreign_keys = ON")
	tx, err := conn.BeginTx(ctx, nil)
	if err != nil {
		return err
	}
	defer tx.Rollback()
	if _, err := tx.ExecContext(ctx, migrations[v]); err != nil {
		return err
	}
	rows, err := tx.QueryContext(ctx, "PRAGMA foreign_key_check")
	if err != nil {
		return err
	}
	bad := rows.Next()
	rows.Close()
	if bad {
		return errors.New("foreign key check failed")
	}
	if _, err := tx.ExecContext(ctx, fmt.Sprintf("PRAGMA user_version = %d", v+1)); err != nil {
		return err
	}
	return tx.Commit()
}

// nsOf stores a time as Unix nanoseconds; the zero time is NULL.
func nsOf(t time.Time) any {
	if t.IsZero() {
		return nil
	}
	return t.UnixNano()
}

func timeOf(ns sql.NullInt64) time.Time {
	if !ns.Valid {
		return time.Time{}
	}
	return time.Unix(0, ns.Int64).UTC()
}

// real stores a float; NaN is NULL (SQLite has no NaN).
func real(f float64) any {
	if math.IsNaN(f) {
		return nil
	}
	return f
}

func floatOf(f sql.NullFloat64) float64 {
	if !f.Valid {
		return math.NaN()
	}
	return f.Float64
}
