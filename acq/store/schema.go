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
	// 2: samples, points, figures and corrections keyed by an integer loop
	// id instead of (run id, loop number): rows are smaller and a 100 k-sample
	// loop commits in about half the time. Runs with foreign keys off (see
	// migrate) following sqlite.org/lang_altertable.html §7.
	`
CREATE TABLE loops_v2 (
	id         INTEGER PRIMARY KEY,
	run_id     TEXT NOT NULL REFERENCES runs(id),
	n          INTEGER NOT NULL,
	kind       TEXT NOT NULL,
	amplitude  REAL,
	amp_unit   TEXT NOT NULL,
	started_ns INTEGER,
	n_raw      INTEGER NOT NULL,
	n_points   INTEGER NOT NULL,
	UNIQUE (run_id, n)
);
INSERT INTO loops_v2 (run_id, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points)
	SELECT run_id, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points FROM loops ORDER BY run_id, n;

CREATE TABLE raw_samples_v2 (
	loop_id   INTEGER NOT NULL REFERENCES loops(id),
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
	PRIMARY KEY (loop_id, seq)
) WITHOUT ROWID;
INSERT INTO raw_samples_v2 SELECT l.id, r.seq, r.t_ns, r.t_unc_ns, r.phase, r.setpoint, r.i_a, r.v_v, r.psi_wb, r.b_probe_t, r.temp_c
	FROM raw_samples r JOIN loops_v2 l ON l.run_id = r.run_id AND l.n = r.loop_n;

CREATE TABLE points_v2 (
	loop_id INTEGER NOT NULL REFERENCES loops(id),
	seq     INTEGER NOT NULL,
	t_ns    INTEGER NOT NULL,
	h_a_m   REAL,
	b_t     REAL,
	j_t     REAL,
	branch  INTEGER NOT NULL,
	PRIMARY KEY (loop_id, seq)
) WITHOUT ROWID;
INSERT INTO points_v2 SELECT l.id, p.seq, p.t_ns, p.h_a_m, p.b_t, p.j_t, p.branch
	FROM points p JOIN loops_v2 l ON l.run_id = p.run_id AND l.n = p.loop_n;

CREATE TABLE figures_v2 (
	loop_id INTEGER NOT NULL REFERENCES loops(id),
	seq     INTEGER NOT NULL,
	name    TEXT NOT NULL,
	value   REAL,
	u       REAL,
	unit    TEXT NOT NULL,
	note    TEXT NOT NULL,
	PRIMARY KEY (loop_id, seq)
) WITHOUT ROWID;
INSERT INTO figures_v2 SELECT l.id, f.seq, f.name, f.value, f.u, f.unit, f.note
	FROM figures f JOIN loops_v2 l ON l.run_id = f.run_id AND l.n = f.loop_n;

CREATE TABLE corrections_v2 (
	loop_id INTEGER NOT NULL REFERENCES loops(id),
	seq     INTEGER NOT NULL,
	name    TEXT NOT NULL,
	size    REAL,
	unit    TEXT NOT NULL,
	note    TEXT NOT NULL,
	PRIMARY KEY (loop_id, seq)
) WITHOUT ROWID;
INSERT INTO corrections_v2 SELECT l.id, c.seq, c.name, c.size, c.unit, c.note
	FROM corrections c JOIN loops_v2 l ON l.run_id = c.run_id AND l.n = c.loop_n;

DROP TABLE raw_samples;
DROP TABLE points;
DROP TABLE figures;
DROP TABLE corrections;
DROP TABLE loops;
ALTER TABLE loops_v2 RENAME TO loops;
ALTER TABLE raw_samples_v2 RENAME TO raw_samples;
ALTER TABLE points_v2 RENAME TO points;
ALTER TABLE figures_v2 RENAME TO figures;
ALTER TABLE corrections_v2 RENAME TO corrections;
CREATE INDEX figures_by_name ON figures(name);
CREATE INDEX loops_by_run ON loops(run_id, n);
`,
	// 3: each channel's own time: the offsets of the current's and the
	// field meter's readings from the flux reading's midpoint t_ns
	// (record.Sample.DtI, DtB). Samples written before read back with 0.
	`
ALTER TABLE raw_samples ADD COLUMN dt_i_ns INTEGER NOT NULL DEFAULT 0;
ALTER TABLE raw_samples ADD COLUMN dt_b_ns INTEGER NOT NULL DEFAULT 0;
`,
	// 4: the material grade and operator of each run, and the verdicts of
	// each loop against the grade (acq/grade). Runs stored before read back
	// with no grade, no operator and no verdicts.
	`
ALTER TABLE runs ADD COLUMN grade TEXT NOT NULL DEFAULT '';
ALTER TABLE runs ADD COLUMN operator TEXT NOT NULL DEFAULT '';
CREATE TABLE verdicts (
	loop_id INTEGER NOT NULL REFERENCES loops(id),
	seq     INTEGER NOT NULL,
	grade   TEXT NOT NULL,
	figure  TEXT NOT NULL,
	value   REAL,
	u       REAL,
	lo      REAL,
	hi      REAL,
	unit    TEXT NOT NULL,
	rule    TEXT NOT NULL,
	outcome TEXT NOT NULL CHECK (outcome IN ('pass', 'fail', 'undecided')),
	note    TEXT NOT NULL,
	PRIMARY KEY (loop_id, seq)
) WITHOUT ROWID;
CREATE INDEX runs_by_recipe ON runs(recipe, started_ns);
`, // 5: revisions. A re-processed run keeps every revision: loops are
	// keyed by (run, revision, loop number), the outbox entry names the
	// revision it sends, runs.revision is the latest. Raw samples stay with
	// the revision-1 loop row (a later revision's row holds none). A
	// revisions row holds the specimen and config of each revision; a run
	// never re-processed has none (revision 1 is the runs row). Existing
	// loops and outbox entries become revision 1, keeping their ids.
	`
ALTER TABLE runs ADD COLUMN revision INTEGER NOT NULL DEFAULT 1;
CREATE TABLE revisions (
	run_id      TEXT NOT NULL REFERENCES runs(id),
	n           INTEGER NOT NULL,
	at_ns       INTEGER,
	by_name     TEXT NOT NULL,
	change      TEXT NOT NULL,
	fixture     TEXT NOT NULL,
	specimen    TEXT NOT NULL,
	material    TEXT NOT NULL,
	grade       TEXT NOT NULL,
	config      TEXT NOT NULL,
	config_hash TEXT NOT NULL,
	PRIMARY KEY (run_id, n)
) WITHOUT ROWID;

CREATE TABLE loops_v5 (
	id         INTEGER PRIMARY KEY,
	run_id     TEXT NOT NULL REFERENCES runs(id),
	revision   INTEGER NOT NULL DEFAULT 1,
	n          INTEGER NOT NULL,
	kind       TEXT NOT NULL,
	amplitude  REAL,
	amp_unit   TEXT NOT NULL,
	started_ns INTEGER,
	n_raw      INTEGER NOT NULL,
	n_points   INTEGER NOT NULL,
	UNIQUE (run_id, revision, n)
);
INSERT INTO loops_v5 (id, run_id, revision, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points)
	SELECT id, run_id, 1, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points FROM loops;

CREATE TABLE outbox_v5 (
	id         INTEGER PRIMARY KEY,
	run_id     TEXT NOT NULL,
	revision   INTEGER NOT NULL DEFAULT 1,
	loop_n     INTEGER NOT NULL,
	created_ns INTEGER NOT NULL,
	state      TEXT NOT NULL CHECK (state IN ('pending', 'delivered', 'quarantined')),
	done       INTEGER NOT NULL DEFAULT 0,
	attempts   INTEGER NOT NULL DEFAULT 0,
	last_error TEXT NOT NULL DEFAULT '',
	updated_ns INTEGER NOT NULL,
	FOREIGN KEY (run_id, revision, loop_n) REFERENCES loops(run_id, revision, n)
);
INSERT INTO outbox_v5 (id, run_id, revision, loop_n, created_ns, state, done, attempts, last_error, updated_ns)
	SELECT id, run_id, 1, loop_n, created_ns, state, done, attempts, last_error, updated_ns FROM outbox;

DROP TABLE outbox;
DROP TABLE loops;
ALTER TABLE loops_v5 RENAME TO loops;
ALTER TABLE outbox_v5 RENAME TO outbox;
CREATE INDEX loops_by_run ON loops(run_id, revision, n);
CREATE INDEX outbox_by_state ON outbox(state, id);
`,
	// 6: loops remember whether the supply ramped continuously during the
	// sweep (buffered capture, sweep_mode: ramp), so that re-processing
	// budgets the timing uncertainty again; earlier loops were stepped.
	`
ALTER TABLE loops ADD COLUMN ramped INTEGER NOT NULL DEFAULT 0 CHECK (ramped IN (0, 1));
`,
}
