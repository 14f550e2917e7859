package daemon

import (
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"hystd/acq/live"
	"hystd/acq/record"
	"hystd/buildinfo"
)

// Metrics are the daemon's Prometheus collectors, in a registry of their own
// (Registry) to which the forwarder and others may add.
type Metrics struct {
	Registry *prometheus.Registry
	queued   *prometheus.GaugeVec
	active   *prometheus.GaugeVec
	ended    *prometheus.CounterVec
	refused  *prometheus.CounterVec
	reloads  *prometheus.CounterVec
	files    *prometheus.CounterVec
	samples  prometheus.Counter
}

func newMetrics(d *Daemon, version string) *Metrics {
	m := &Metrics{
		Registry: prometheus.NewRegistry(),
		queued:   prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "hystd_runs_queued", Help: "Runs waiting for their fixture."}, []string{"fixture"}),
		active:   prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "hystd_run_active", Help: "1 while a run is under way on the fixture."}, []string{"fixture"}),
		ended:    prometheus.NewCounterVec(prometheus.CounterOpts{Name: "hystd_runs_ended_total", Help: "Runs ended, by final state."}, []string{"fixture", "state"}),
		refused:  prometheus.NewCounterVec(prometheus.CounterOpts{Name: "hystd_recipes_refused_total", Help: "Recipes refused before they were queued (bad file or beyond a fixture limit)."}, []string{"fixture", "source"}),
		reloads:  prometheus.NewCounterVec(prometheus.CounterOpts{Name: "hystd_config_reloads_total", Help: "Config reloads, by result."}, []string{"result"}),
		files:    prometheus.NewCounterVec(prometheus.CounterOpts{Name: "hystd_watch_files_total", Help: "Recipe files picked up from watched folders, by outcome."}, []string{"fixture", "outcome"}),
		samples:  prometheus.NewCounter(prometheus.CounterOpts{Name: "hystd_live_samples_total", Help: "Samples recorded in loops, all fixtures."}),
	}
	labels := prometheus.Labels(buildinfo.Read().Labels())
	if version != "" {
		labels["software"] = version
	}
	info := prometheus.NewGauge(prometheus.GaugeOpts{Name: "hystd_build_info", Help: "Always 1; version, VCS revision, modified flag, Go version and the recorded software text are labels.", ConstLabels: labels})
	info.Set(1)
	m.Registry.MustRegister(m.queued, m.active, m.ended, m.refused, m.reloads, m.files, m.samples, info,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

// initFixture creates every per-fixture series at zero, so that a fixture
// shows in /metrics (and rate() has a start) before its first run.
func (m *Metrics) initFixture(name string) {
	m.queued.WithLabelValues(name)
	m.active.WithLabelValues(name)
	for _, st := range []record.State{record.Finished, record.Aborted, record.Failed} {
		m.ended.WithLabelValues(name, string(st))
	}
	for _, src := range []string{"api", "watch", "schedule", "cli"} {
		m.refused.WithLabelValues(name, src)
	}
	for _, o := range []string{"queued", "refused", DoneDir, FailedDir} {
		m.files.WithLabelValues(name, o)
	}
}

// ReloadFailed counts a reload refused because the new config was invalid.
func (m *Metrics) ReloadFailed() { m.reloads.WithLabelValues("error").Inc() }

// countingPublisher counts live samples on the way to the real publisher.
type countingPublisher struct {
	next interface{ Publish(live.Event) }
	m    *Metrics
}

func (c countingPublisher) Publish(e live.Event) {
	if e.Kind == live.KindSample {
		c.m.samples.Inc()
	}
	if c.next != nil {
		c.next.Publish(e)
	}
}
