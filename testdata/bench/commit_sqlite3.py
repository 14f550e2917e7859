#!/usr/bin/env python3
"""Peer of hystd's local commit (acq/store AddLoop) for the benchmark in
acq/store (BenchmarkCommitBesideSqlite3): CPython's sqlite3 module commits
the same loop (rows written by the benchmark as JSON) into the same store
file (so the same schema), with the same pragmas as store.Open, in one
transaction: the run's check, the loop row, executemany of the raw samples,
points, figures, corrections and verdicts, the outbox row. Only the
transaction is timed (BEGIN to COMMIT); it prints the seconds it took and
the processor seconds (user plus system) the process used meanwhile.

    python3 commit_sqlite3.py STORE.db ROWS.json LOOP_N
"""
import json
import sqlite3
import sys
import time


def main(db, rows, n):
    with open(rows) as f:
        d = json.load(f)
    con = sqlite3.connect(db, isolation_level=None)
    for p in ("busy_timeout = 10000", "journal_mode = WAL", "synchronous = FULL", "foreign_keys = 1"):
        con.execute("PRAGMA " + p)
    run = d["run_id"]
    t0, c0 = time.perf_counter(), time.process_time()
    con.execute("BEGIN IMMEDIATE")
    if con.execute("SELECT 1 FROM runs WHERE id = ?", (run,)).fetchone() is None:
        sys.exit("no run " + run)
    if con.execute("SELECT 1 FROM loops WHERE run_id = ? AND n = ?", (run, n)).fetchone() is not None:
        sys.exit("loop exists")
    cur = con.execute(
        "INSERT INTO loops (run_id, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        (run, n, d["kind"], d["amplitude"], d["amp_unit"], d["started_ns"], len(d["raw"]), len(d["points"])))
    lid = cur.lastrowid
    con.executemany(
        "INSERT INTO raw_samples (loop_id, seq, t_ns, t_unc_ns, phase, setpoint, i_a, v_v, psi_wb, b_probe_t, temp_c, dt_i_ns, dt_b_ns)"
        " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        ((lid, i, *r) for i, r in enumerate(d["raw"])))
    con.executemany(
        "INSERT INTO points (loop_id, seq, t_ns, h_a_m, b_t, j_t, branch) VALUES (?, ?, ?, ?, ?, ?, ?)",
        ((lid, i, *r) for i, r in enumerate(d["points"])))
    con.executemany(
        "INSERT INTO figures (loop_id, seq, name, value, u, unit, note) VALUES (?, ?, ?, ?, ?, ?, ?)",
        ((lid, i, *r) for i, r in enumerate(d["figures"])))
    con.executemany(
        "INSERT INTO corrections (loop_id, seq, name, size, unit, note) VALUES (?, ?, ?, ?, ?, ?)",
        ((lid, i, *r) for i, r in enumerate(d["corrections"])))
    con.executemany(
        "INSERT INTO verdicts (loop_id, seq, grade, figure, value, u, lo, hi, unit, rule, outcome, note)"
        " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        ((lid, i, *r) for i, r in enumerate(d["verdicts"])))
    con.execute(
        "INSERT INTO outbox (run_id, loop_n, created_ns, state, updated_ns) VALUES (?, ?, ?, 'pending', ?)",
        (run, n, d["now_ns"], d["now_ns"]))
    con.execute("COMMIT")
    print(time.perf_counter() - t0, time.process_time() - c0)
    print("sqlite", sqlite3.sqlite_version, file=sys.stderr)
    con.close()


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], int(sys.argv[3]))
