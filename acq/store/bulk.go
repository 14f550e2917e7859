package store

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"fmt"
	"math"
	"strings"
	"sync"

	"hystd/acq/record"

	"modernc.org/sqlite/vtab"
)

// The bulk of a loop (raw samples, points) reaches SQLite through a
// virtual table, not through bound parameters: binding costs the driver a
// call into SQLite per value, each taking the connection's mutex, and that
// was 25–30 % of a commit's processor time. Module bulkModule serves, in
// the writer connection's temp schema (never in the store file), the table
// bulkTable with the columns src, seq, c0 … c10; `SELECT … FROM bulkTable
// WHERE src = K` yields the rows of the source registered under key K, row
// i with seq = rowid = i and its typed values (INTEGER, REAL, TEXT or NULL)
// in c0, c1, …. insertBulk copies them into the store's table with one
// INSERT … SELECT: the stored rows are the same typed rows a bound INSERT
// writes. It takes the sequence number as the rowid, which SQLite reads as
// an integer, where a column value would be a Go value boxed for each row.
const (
	bulkModule = "hystd_bulk"
	bulkTable  = "temp.hystd_bulk"
	bulkCols   = 11 // value columns: enough for the widest source (raw samples)
)

// bulkSource is the rows of one table: table and its columns after
// (loop_id, seq); n rows; value(i, c, last) is the value of column c of row
// i: int64, float64, string or nil (NULL), nothing else. last is the value
// it gave for column c of the row before (nil for the first): an equal
// value returns last itself instead of boxing a new one (intInto, realInto,
// textInto), as phase, hold setpoints, timing offsets and branch repeat
// from row to row.
type bulkSource struct {
	table string
	cols  []string
	n     int
	value func(i, c int, last driver.Value) driver.Value
}

func intInto(v int64, last driver.Value) driver.Value {
	if p, ok := last.(int64); ok && p == v {
		return last
	}
	return v
}

// realInto is a float as a value; NaN is NULL (SQLite has no NaN).
func realInto(v float64, last driver.Value) driver.Value {
	if math.IsNaN(v) {
		return nil
	}
	if p, ok := last.(float64); ok && math.Float64bits(p) == math.Float64bits(v) {
		return last
	}
	return v
}

func textInto(v string, last driver.Value) driver.Value {
	if p, ok := last.(string); ok && p == v {
		return last
	}
	return v
}

// rawSource is the raw samples as rows of raw_samples.
func rawSource(raw []record.Sample) bulkSource {
	return bulkSource{
		table: "raw_samples",
		cols:  []string{"t_ns", "t_unc_ns", "phase", "setpoint", "i_a", "v_v", "psi_wb", "b_probe_t", "temp_c", "dt_i_ns", "dt_b_ns"},
		n:     len(raw),
		value: func(i, c int, last driver.Value) driver.Value {
			r := &raw[i]
			switch c {
			case 0:
				return intInto(int64(r.T), last)
			case 1:
				return intInto(int64(r.TUnc), last)
			case 2:
				return textInto(string(r.Phase), last)
			case 3:
				return realInto(r.Setpoint, last)
			case 4:
				return realInto(r.I, last)
			case 5:
				return realInto(r.V, last)
			case 6:
				return realInto(r.Psi, last)
			case 7:
				return realInto(r.BProbe, last)
			case 8:
				return realInto(r.TempC, last)
			case 9:
				return intInto(int64(r.DtI), last)
			default:
				return intInto(int64(r.DtB), last)
			}
		},
	}
}

// pointSource is the corrected points as rows of points.
func pointSource(pts []record.Point) bulkSource {
	return bulkSource{
		table: "points",
		cols:  []string{"t_ns", "h_a_m", "b_t", "j_t", "branch"},
		n:     len(pts),
		value: func(i, c int, last driver.Value) driver.Value {
			p := &pts[i]
			switch c {
			case 0:
				return intInto(int64(p.T), last)
			case 1:
				return realInto(p.H, last)
			case 2:
				return realInto(p.B, last)
			case 3:
				return realInto(p.J, last)
			default:
				return intInto(int64(p.Branch), last)
			}
		},
	}
}

// insertBulk inserts the rows of src with loop id loopID in tx, with one
// INSERT … SELECT from bulkTable (created on tx's connection if it has
// none yet). Nothing is inserted for no rows.
func insertBulk(ctx context.Context, tx *sql.Tx, loopID int64, src bulkSource) error {
	if src.n == 0 {
		return nil
	}
	if len(src.cols) > bulkCols {
		return fmt.Errorf("%s: %d columns, the bulk table has %d", src.table, len(src.cols), bulkCols)
	}
	if _, err := tx.ExecContext(ctx, "CREATE VIRTUAL TABLE IF NOT EXISTS "+bulkTable+" USING "+bulkModule); err != nil {
		return err
	}
	key := sources.add(src)
	defer sources.drop(key)
	vals := make([]string, len(src.cols))
	for c := range vals {
		vals[c] = fmt.Sprintf("c%d", c)
	}
	q := "INSERT INTO " + src.table + " (loop_id, seq, " + strings.Join(src.cols, ", ") + ") SELECT ?1, rowid, " +
		strings.Join(vals, ", ") + " FROM " + bulkTable + " WHERE src = ?2"
	res, err := tx.ExecContext(ctx, q, loopID, key)
	if err != nil {
		return err
	}
	if n, err := res.RowsAffected(); err != nil {
		return err
	} else if n != int64(src.n) {
		return fmt.Errorf("%d of %d rows inserted", n, src.n)
	}
	return nil
}

// sources holds the sources being inserted, by key. A key is never reused.
var sources = registry{m: map[int64]bulkSource{}}

type registry struct {
	mu   sync.Mutex
	next int64
	m    map[int64]bulkSource
}

func (r *registry) add(s bulkSource) int64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.next++
	r.m[r.next] = s
	return r.next
}

func (r *registry) drop(key int64) {
	r.mu.Lock()
	defer r.mu.Unlock()
	delete(r.m, key)
}

func (r *registry) find(key int64) (bulkSource, bool) {
	r.mu.Lock()
	defer r.mu.Unlock()
	s, ok := r.m[key]
	return s, ok
}

// registerBulk registers bulkModule with the driver, once per process; a
// connection opened afterwards has it.
var registerBulk = sync.OnceValue(func() error {
	return vtab.RegisterModule(nil, bulkModule, bulkMod{})
})

type bulkMod struct{}

func (bulkMod) Create(ctx vtab.Context, _ []string) (vtab.Table, error)  { return declareBulk(ctx) }
func (bulkMod) Connect(ctx vtab.Context, _ []string) (vtab.Table, error) { return declareBulk(ctx) }

func declareBulk(ctx vtab.Context) (vtab.Table, error) {
	var b strings.Builder
	b.WriteString("CREATE TABLE x(src INTEGER, seq INTEGER")
	for c := 0; c < bulkCols; c++ {
		fmt.Fprintf(&b, ", c%d", c)
	}
	b.WriteString(")")
	if err := ctx.Declare(b.String()); err != nil {
		return nil, err
	}
	return bulkTab{}, nil
}

type bulkTab struct{}

// BestIndex plans `src = ?` (column 0) as a lookup of that source;
// without that constraint the table is empty.
func (bulkTab) BestIndex(info *vtab.IndexInfo) error {
	info.IdxNum, info.EstimatedCost = 0, 1e12
	for i := range info.Constraints {
		c := &info.Constraints[i]
		if c.Column == 0 && c.Op == vtab.OpEQ && c.Usable {
			c.ArgIndex, c.Omit = 0, true
			info.IdxNum, info.EstimatedCost = 1, 1
			return nil
		}
	}
	return nil
}

func (bulkTab) Open() (vtab.Cursor, error) { return &bulkCursor{}, nil }
func (bulkTab) Disconnect() error          { return nil }
func (bulkTab) Destroy() error             { return nil }

type bulkCursor struct {
	src  bulkSource
	key  int64
	i    int
	last [bulkCols]driver.Value // the values of row i-1 (or row i once read)
}

func (c *bulkCursor) Filter(idxNum int, _ string, vals []vtab.Value) error {
	*c = bulkCursor{}
	if idxNum != 1 || len(vals) != 1 {
		return nil
	}
	key, ok := vals[0].(int64)
	if !ok {
		return fmt.Errorf("%s: source key %v (%T) is not an integer", bulkModule, vals[0], vals[0])
	}
	s, ok := sources.find(key)
	if !ok {
		return fmt.Errorf("%s: no source %d", bulkModule, key)
	}
	c.src, c.key = s, key
	return nil
}

func (c *bulkCursor) Next() error { c.i++; return nil }
func (c *bulkCursor) Eof() bool   { return c.i >= c.src.n }

func (c *bulkCursor) Column(col int) (vtab.Value, error) {
	switch {
	case col == 0:
		return c.key, nil
	case col == 1:
		return int64(c.i), nil
	case col-2 < len(c.src.cols):
		v := c.src.value(c.i, col-2, c.last[col-2])
		c.last[col-2] = v
		return v, nil
	}
	return nil, nil
}

func (c *bulkCursor) Rowid() (int64, error) { return int64(c.i), nil }
func (c *bulkCursor) Close() error          { return nil }
