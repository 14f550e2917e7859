package influx

import (
	"context"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"hystd/acq/store"
)

// metrics are the forwarder's Prometheus collectors.
type metrics struct {
	backlog  prometheus.Collector
	points   prometheus.Counter
	batches  prometheus.Counter
	loops    prometheus.Counter
	failures *prometheus.CounterVec
	lastOK   prometheus.Gauge
}

func newMetrics(ob store.Outbox, now func() time.Time) *metrics {
	return &metrics{
		backlog: NewBacklogCollector(ob, now),
		points: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "hystd_forward_points_total", Help: "Points acknowledged by the time-series server.",
		}),
		batches: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "hystd_forward_batches_total", Help: "Write requests acknowledged by the time-series server.",
		}),
		loops: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "hystd_forward_loops_total", Help: "Loops completely delivered.",
		}),
		failures: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "hystd_forward_failures_total", Help: "Failed writes by outcome: retry or quarantine.",
		}, []string{"outcome"}),
		lastOK: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "hystd_forward_last_delivery_timestamp_seconds", Help: "Unix time of the last completed loop delivery.",
		}),
	}
}

// Collectors returns the forwarder's metrics for the daemon to register:
// backlog size and age (read from the outbox at each scrape) and delivery
// counters.
func (f *Forwarder) Collectors() []prometheus.Collector {
	return []prometheus.Collector{f.m.backlog, f.m.points, f.m.batches, f.m.loops, f.m.failures, f.m.lastOK}
}

// backlogCollector reads the outbox backlog at scrape time.
type backlogCollector struct {
	ob          store.Outbox
	now         func() time.Time
	pending     *prometheus.Desc
	age         *prometheus.Desc
	quarantined *prometheus.Desc
	up          *prometheus.Desc
}

// NewBacklogCollector reports the outbox backlog of ob at each scrape:
// hystd_outbox_pending_loops, hystd_outbox_oldest_pending_age_seconds (0
// when empty), hystd_outbox_quarantined_loops, and hystd_outbox_read_ok
// (0 when the store could not be read within 2 s).
func NewBacklogCollector(ob store.Outbox, now func() time.Time) prometheus.Collector {
	if now == nil {
		now = time.Now
	}
	return &backlogCollector{
		ob: ob, now: now,
		pending:     prometheus.NewDesc("hystd_outbox_pending_loops", "Stored loops not yet delivered to the time-series server.", nil, nil),
		age:         prometheus.NewDesc("hystd_outbox_oldest_pending_age_seconds", "Age of the oldest undelivered loop, 0 when none.", nil, nil),
		quarantined: prometheus.NewDesc("hystd_outbox_quarantined_loops", "Loops the server refused (400/422), kept aside with its message.", nil, nil),
		up:          prometheus.NewDesc("hystd_outbox_read_ok", "1 if the outbox could be read for this scrape.", nil, nil),
	}
}

func (c *backlogCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- c.pending
	ch <- c.age
	ch <- c.quarantined
	ch <- c.up
}

func (c *backlogCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	b, err := c.ob.Backlog(ctx)
	if err != nil {
		ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, 0)
		return
	}
	age := 0.0
	if !b.Oldest.IsZero() {
		age = max(c.now().Sub(b.Oldest).Seconds(), 0)
	}
	ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, 1)
	ch <- prometheus.MustNewConstMetric(c.pending, prometheus.GaugeValue, float64(b.Pending))
	ch <- prometheus.MustNewConstMetric(c.age, prometheus.GaugeValue, age)
	ch <- prometheus.MustNewConstMetric(c.quarantined, prometheus.GaugeValue, float64(b.Quarantined))
}
