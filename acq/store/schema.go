package store

// migrations are applied in order; migration i brings the database from
// user_version i to i+1. Never edit a released migration: append a new one.
var migrations = []string{
	// 1: runs, loops, raw and corrected samples, figures, corrections,
	// events and the forwarder's outbox.
	`
CREATE TABLE runs (
	id          TEXT PRIMARY KEY,
	recipe      TEXT NOT NULL,
	recipe_text TEXT NOT NULL,
	fixture     TEXT NOT NULL,
	specimen    TEXT NOT NULL,
	material    TEXT NOT NULL,
	config      TEXT NOT NULL,
	config_hash TEXT NOT NULL,
	software    TEXT NOT NULL,
	state       TEXT NOT NULL,
	reason      TEXT NOT NULL,
	queued_ns   INTEGER,
	started_ns  INTEGER,
	ended_ns    INTEGER
);
CREATE INDEX runs_by_started ON runs(started_ns DESC, id DESC);
CREATE INDEX runs_by_specimen ON runs(specimen, started_ns);

CREATE TABLE loops (
	run_id     TEXT NOT NULL REFERENCES runs(id),
	n          INTEGER NOT NULL,
	kind       TEXT NOT NULL,
	amplitude  REAL,
	amp_unit   TEXT NOT NULL,
	started_ns INTEGER,
	n_raw      INTEGER NOT NULL,
	n_points   INTEGER NOT NULL,
	PRIMARY KEY (run_id, n)
) WITHOUT ROWID;

CREATE TABLE raw_samples (
	run_id    TEXT NOT NULL,
	loop_n    INTEGER NOT NULL,
	seq       INTEGER NOT NULL,
	t_ns      INTEGER NOT NULL,
	t_unc_ns  INTEGER NOT NULL,
	phase     TEXT NOT NULL,
	setpoint  REAL,
	i_a       REAL,
	v_v       REAL,
	psi_wb    REAL,
	b_probe_t REAL,
	temp_c    REAL,
	PRIMARY KEY (run_id, loop_n, seq),
	FOREIGN KEY (run_id, loop_n) REFERENCES loops(run_id, n)
) WITHOUT ROWID;

CREATE TABLE points (
	run_id  TEXT NOT NULL,
	loop_n  INTEGER NOT NULL,
	seq     INTEGER NOT NULL,
	t_ns    INTEGER NOT NULL,
	h_a_m   REAL,
	b_t     REAL,
	j_t     REAL,
	branch  INTEGER NOT NULL,
	PRIMARY KEY (run_id, loop_n, seq),
	FOREIGN KEY (run_id, loop_n) REFERENCES loops(run_id, n)
) WITHOUT ROWID;

CREATE TABLE figures (
	run_id TEXT NOT NULL,
	loop_n INTEGER NOT NULL,
	seq    INTEGER NOT NULL,
	name   TEXT NOT NULL,
	value  REAL,
	u      REAL,
	unit   TEXT NOT NULL,
	note   TEXT NOT NULL,
	PRIMARY KEY (run_id, loop_n, seq),
	FOREIGN KEY (run_id, loop_n) REFERENCES loops(run_id, n)
) WITHOUT ROWID;
CREATE INDEX figures_by_name ON figures(name);

CREATE TABLE corrections (
	run_id TEXT NOT NULL,
	loop_n INTEGER NOT NULL,
	seq    INTEGER NOT NULL,
	name   TEXT NOT NULL,
	size   REAL,
	unit   TEXT NOT NULL,
	note   TEXT NOT NULL,
	PRIMARY KEY (run_id, loop_n, seq),
	FOREIGN KEY (run_id, loop_n) REFERENCES loops(run_id, n)
) WITHOUT ROWID;

CREATE TABLE events (
	id     INTEGER PRIMARY KEY,
	run_id TEXT NOT NULL REFERENCES runs(id),
	at_ns  INTEGER,
	level  TEXT NOT NULL,
	text   TEXT NOT NULL
);
CREATE INDEX events_by_run ON events(run_id, id);

CREATE TABLE outbox (
	id         INTEGER PRIMARY KEY,
	run_id     TEXT NOT NULL,
	loop_n     INTEGER NOT NULL,
	created_ns INTEGER NOT NULL,
	state      TEXT NOT NULL CHECK (state IN ('pending', 'delivered', 'quarantined')),
	done       INTEGER NOT NULL DEFAULT 0,
	attempts   INTEGER NOT NULL DEFAULT 0,
	last_error TEXT NOT NULL DEFAULT '',
	updated_ns INTEGER NOT NULL,
	FOREIGN KEY (run_id, loop_n) REFERENCES loops(run_id, n)
);
CREATE INDEX outbox_by_state ON outbox(state, id);
`,
}
