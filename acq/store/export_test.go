package store

import (
	"context"
	"database/sql"
	"net/url"

	"hystd/acq/record"
)

// WriterForTest exposes the writer pool to the package's tests.
func (s *Store) WriterForTest() *sql.DB { return s.w }

// CreateAtVersionForTest creates a store file with the schema of version v
// only and returns its writer pool (the caller closes it).
func CreateAtVersionForTest(ctx context.Context, path string, v int) (*sql.DB, error) {
	u := url.URL{Scheme: "file", Path: path}
	db, err := sql.Open("sqlite", u.String()+"?_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=foreign_keys(1)")
	if err != nil {
		return nil, err
	}
	db.SetMaxOpenConns(1)
	s := &Store{w: db}
	if err := s.migrateTo(ctx, v); err != nil {
		db.Close()
		return nil, err
	}
	return db, nil
}

// InsertRawForTest inserts raw samples of loop loopID in tx the way AddLoop
// does.
func InsertRawForTest(ctx context.Context, tx *sql.Tx, loopID int64, raw []record.Sample) error {
	return insertBulk(ctx, tx, loopID, rawSource(raw))
}
