package server

import (
	"strconv"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"github.com/midsag/midsag"
)

// Metrics are the service's Prometheus metrics. A nil *Metrics records
// nothing, so tests need not build one.
type Metrics struct {
	Registry *prometheus.Registry

	requests  *prometheus.CounterVec
	latency   *prometheus.HistogramVec
	instances *prometheus.CounterVec
	jobs      *prometheus.CounterVec
	jobTime   prometheus.Histogram
	stages    *prometheus.HistogramVec
}

// NewMetrics registers the service's metrics on a new registry, with the
// Go and process collectors. queueDepth and associations are read when
// scraped.
func NewMetrics(queueDepth func() float64, associations func() float64) *Metrics {
	reg := prometheus.NewRegistry()
	m := &Metrics{
		Registry: reg,
		requests: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "midsag_requests_total", Help: "Requests by endpoint and status code.",
		}, []string{"endpoint", "code"}),
		latency: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name: "midsag_request_seconds", Help: "Request latency by endpoint.",
			Buckets: prometheus.ExponentialBuckets(0.005, 2, 14),
		}, []string{"endpoint"}),
		instances: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "midsag_instances_stored_total", Help: "DICOM instances stored durably, by listener.",
		}, []string{"listener"}),
		jobs: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "midsag_jobs_total", Help: "Scoring jobs finished, by status.",
		}, []string{"status"}),
		jobTime: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "midsag_job_seconds", Help: "Time to score one study, reading included.",
			Buckets: prometheus.ExponentialBuckets(0.01, 2, 14),
		}),
		stages: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name: "midsag_stage_seconds", Help: "Scoring time by pipeline stage.",
			Buckets: prometheus.ExponentialBuckets(0.0005, 2, 16),
		}, []string{"stage"}),
	}
	reg.MustRegister(m.requests, m.latency, m.instances, m.jobs, m.jobTime, m.stages,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "midsag_queue_depth", Help: "Scoring jobs queued or running."}, queueDepth),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "midsag_dicom_associations", Help: "Open DICOM associations."}, associations),
	)
	return m
}

// ObserveRequest records one request to an endpoint.
func (m *Metrics) ObserveRequest(endpoint string, code int, d time.Duration) {
	if m == nil {
		return
	}
	m.requests.WithLabelValues(endpoint, strconv.Itoa(code)).Inc()
	m.latency.WithLabelValues(endpoint).Observe(d.Seconds())
}

func (m *Metrics) instanceStored(listener string) {
	if m == nil {
		return
	}
	m.instances.WithLabelValues(listener).Inc()
}

func (m *Metrics) jobDone(status string, d time.Duration) {
	if m == nil {
		return
	}
	m.jobs.WithLabelValues(status).Inc()
	m.jobTime.Observe(d.Seconds())
}

func (m *Metrics) observeResult(r *midsag.Result) {
	if m == nil {
		return
	}
	for stage, ms := range r.TimingsMS {
		if stage != "total" {
			m.stages.WithLabelValues(stage).Observe(ms / 1000)
		}
	}
}
