package store

import "database/sql"

// WriterForTest exposes the writer pool to the package's tests.
func (s *Store) WriterForTest() *sql.DB { return s.w }
