// Package influx forwards stored loops to a time-series database through the
// InfluxDB v2 write API (InfluxDB 2.x and 3, 1.8+, VictoriaMetrics). The
// local store is the record of truth; the forwarder drains its outbox:
// pending entries are turned into points (Points, encoded by Lines), written
// in batches with the client's blocking write API (WriteRecord), and marked delivered only after the server
// acknowledged every batch. Progress is kept per batch, so a restart resumes
// where the last acknowledged batch ended; timestamps and tags are
// deterministic, so a batch sent twice overwrites itself.
//
// Network errors, 429 and 5xx are retried with exponential backoff (and the
// server's Retry-After); 400 and 422 quarantine the entry with the server's
// message; 413 halves the batch for that loop. The token is read once, at New, and never logged.
//
// The forwarder reads and encodes the next loop while the current one is on the wire; on two shared cores the
// server's own ingestion is the limit (writing pre-encoded lines alone reached ≈ 160 000 points/s).
//
// # Forwarder tests
//
// `go test ./acq/influx/` builds VictoriaMetrics v1.150.0 with `go install` into `<user cache>/hystd-vm`
// (override with `HYSTD_VM_DIR`; reused when present), starts it on 127.0.0.1 and checks, through
// `/api/v1/export`, that every field value arrives exactly once (value, series and millisecond):
//
//   - `TestVMDemoRun`: a run recorded by the demo itself (simulated bench, real engine and store);
//   - `TestVMEverySampleOnce`: a three-loop run, and nothing is sent again on a second `DeliverAll`;
//   - `TestVMServerDown`: five runs recorded while the server is stopped arrive after it restarts;
//   - `TestVMKill9`: the test binary re-executes itself as a daemon stand-in, commits two loops and is killed with
//     SIGKILL before any delivery, or after the first acknowledged batch; a new forwarder delivers the rest;
//   - `TestVMFlapping`: three outages in the middle of a twelve-loop backlog (server run with
//     `-dedup.minScrapeInterval=1ms`, as recommended above).
//
// `go test -short` skips these; with `CI=true` a failed server build fails the test instead of skipping it.
//
// More server tests in `acq/influx`:
//
//   - `TestVMClusterPathTags`: static tags (`site`, `bay`) on every point, written through the path a
//     VictoriaMetrics cluster's vminsert serves for tenant 42 (`/insert/42/influx/api/v2/write`; the single-node
//     server is started with `-http.pathPrefix=/insert/42/influx`, so the path handling is real but tenant
//     isolation is not tested). A typo in the path gets HTTP 400 and quarantines both loops with the server's
//     message; `outbox.Requeue` and a second delivery bring every value, read back through the prefixed export.
//   - `TestVMReadmeQueries`: README's PromQL block, evaluated at "now" on a run recorded two hours before, answers;
//     the instant selector without a range answers nothing (staleness).
//   - `TestInfluxV1` (package `influxv1test`): Debian's `influxd` (1.6.7) with authentication on, an admin
//     created by the test, `api: v1` with the token as `user:password` (basic auth) and bucket `hystd/autogen`;
//     every sample and figure value is read back with InfluxQL and compared bit for bit with the store (InfluxDB
//     keeps float64 fields exactly; its JSON prints the shortest round-trip form), static tags on every row,
//     the run's `software` on the figure point; README's InfluxQL block answers; a wrong password gets 401 and
//     nothing is marked delivered. Skipped without `influxd` (or under -short), failed under CI=true.
package influx
