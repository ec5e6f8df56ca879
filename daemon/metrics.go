package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"net/http"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/curvewatch/curvewatch/jobs/history"
)

// The metrics the daemon exports (DESIGN.md, "Metrics"). Labels are model,
// term and outcome only.
//
// Two kinds: the counters and the histogram count what this process did
// (refits it ran, deliveries it attempted) and start at zero with it; the
// gauges describe the fleet and are read from the database at scrape time,
// so that every replica, and a restarted daemon, reports the same figures.
const (
	metricRefits            = "curvewatch_refits_total"
	metricRefitDuration     = "curvewatch_refit_duration_seconds"
	metricDeliveries        = "curvewatch_alert_deliveries_total"
	metricRowsFitted        = "curvewatch_rows_fitted"
	metricLastSuccess       = "curvewatch_last_refit_success_timestamp_seconds"
	metricDevianceExplained = "curvewatch_deviance_explained_ratio"
	metricShiftScore        = "curvewatch_term_shift_score"
	metricShiftSize         = "curvewatch_term_shift_size"
	metricTermEDF           = "curvewatch_term_edf"
	metricPredictiveRatio   = "curvewatch_predictive_deviance_ratio"
	metricAlertsFiring      = "curvewatch_alerts_firing"
)

// Outcomes of a refit (curvewatch_refits_total's outcome label): the
// statuses of history.Status.
var refitOutcomes = []string{string(history.StatusSucceeded), string(history.StatusUnconverged), string(history.StatusFailed)}

// Outcomes of one attempt at an alert delivery
// (curvewatch_alert_deliveries_total's outcome label).
const (
	DeliveryDelivered = "delivered" // the receiver accepted it
	DeliveryRetried   = "retried"   // it failed and will be tried again
	DeliveryAbandoned = "abandoned" // refused, or out of attempts
)

var deliveryOutcomes = []string{DeliveryDelivered, DeliveryRetried, DeliveryAbandoned}

// refitBuckets are the upper bounds of curvewatch_refit_duration_seconds, in
// seconds: a refit takes from tens of milliseconds (a small model) to the
// job timeout (10 minutes by default; 30 minutes is the top bucket).
var refitBuckets = []float64{0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120, 300, 600, 1200, 1800}

// Collector tuning.
const (
	// fleetQueryTimeout bounds the database read of one scrape.
	fleetQueryTimeout = 3 * time.Second
	// fleetMaxAge is how long a snapshot of the fleet is served before it
	// is read again: several scrapes in a row (several Prometheus servers,
	// say) cost one query. After a failed read it is also the wait before
	// the next attempt.
	fleetMaxAge = 5 * time.Second
)

// fleetReader is what the collector reads the fleet from; *history.Store
// satisfies it.
type fleetReader interface {
	Fleet(ctx context.Context, names []string) ([]history.ModelStatus, error)
	TermEDFs(ctx context.Context, fitIDs []int64) (map[int64]map[string]float64, error)
}

// metrics holds the daemon's metrics, registered on a registry of the
// caller's (never the global one), so that each App, and each test, has its
// own.
type metrics struct {
	gatherer   prometheus.Gatherer
	log        *slog.Logger
	models     map[string]bool // the configured models: only they get series
	refits     *prometheus.CounterVec
	duration   *prometheus.HistogramVec
	deliveries *prometheus.CounterVec
	fleet      *fleetCollector
}

// newMetrics registers the daemon's metrics, the Go runtime's and the
// process's on reg, for the configured models names. fleet may be nil
// until the database is connected (see setFleet); until then only the
// counters and the histogram are exported. reg should also be a
// prometheus.Gatherer (a *prometheus.Registry) for handler to serve it.
func newMetrics(reg prometheus.Registerer, fleet fleetReader, names []string, log *slog.Logger) *metrics {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	m := &metrics{
		log:    log,
		models: map[string]bool{},
		refits: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: metricRefits,
			Help: "Refits this process ran, by model and outcome (succeeded, unconverged or failed).",
		}, []string{"model", "outcome"}),
		duration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    metricRefitDuration,
			Help:    "Wall time of the refits this process ran (pull, fit, compare and record), by model.",
			Buckets: refitBuckets,
		}, []string{"model"}),
		deliveries: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: metricDeliveries,
			Help: "Attempts at delivering an alert to a receiver, by outcome (delivered, retried or abandoned).",
		}, []string{"outcome"}),
		fleet: newFleetCollector(names, log),
	}
	m.fleet.set(fleet)
	if g, ok := reg.(prometheus.Gatherer); ok {
		m.gatherer = g
	} else {
		m.gatherer = prometheus.Gatherers{}
	}
	m.refits = register(reg, m.refits, log)
	m.duration = register(reg, m.duration, log)
	m.deliveries = register(reg, m.deliveries, log)
	register(reg, prometheus.Collector(m.fleet), log)
	register(reg, collectors.NewGoCollector(), log)
	register(reg, collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}), log)

	// Every configured model's series exist from the start, at zero, so
	// that increase() sees a model's first failure and a dashboard lists
	// a model before its first refit.
	for _, name := range names {
		m.models[name] = true
		for _, outcome := range refitOutcomes {
			m.refits.WithLabelValues(name, outcome)
		}
		m.duration.WithLabelValues(name)
	}
	for _, outcome := range deliveryOutcomes {
		m.deliveries.WithLabelValues(outcome)
	}
	return m
}

// register registers c on reg. When an equal collector is registered
// already (a registry shared by two Apps), that one is returned, so that
// both count into it; any other error is logged, and c is used
// unregistered.
func register[C prometheus.Collector](reg prometheus.Registerer, c C, log *slog.Logger) C {
	err := reg.Register(c)
	if err == nil {
		return c
	}
	var are prometheus.AlreadyRegisteredError
	if errors.As(err, &are) {
		if existing, ok := are.ExistingCollector.(C); ok {
			return existing
		}
	}
	log.Warn("metrics: a collector could not be registered", "error", err)
	return c
}

// observeRefit counts one refit of model with outcome (succeeded,
// unconverged or failed: a history.Status) that took d. Refits of models
// not in the config, and unknown outcomes, are not counted.
func (m *metrics) observeRefit(model, outcome string, d time.Duration) {
	if m == nil || !m.models[model] {
		return
	}
	if !slices.Contains(refitOutcomes, outcome) {
		m.log.Warn("metrics: refit outcome not counted: not one of succeeded, unconverged, failed", "model", model, "outcome", outcome)
		return
	}
	m.refits.WithLabelValues(model, outcome).Inc()
	m.duration.WithLabelValues(model).Observe(d.Seconds())
}

// observeDelivery counts one attempt at delivering an alert to receiver
// with outcome (DeliveryDelivered, DeliveryRetried or DeliveryAbandoned).
// The receiver is not a label (it may be a URL, and labels are model, term
// and outcome only); it is logged when the outcome is unknown.
func (m *metrics) observeDelivery(receiver, outcome string) {
	if m == nil {
		return
	}
	if !slices.Contains(deliveryOutcomes, outcome) {
		m.log.Warn("metrics: delivery outcome not counted: not one of delivered, retried, abandoned", "receiver", receiver, "outcome", outcome)
		return
	}
	m.deliveries.WithLabelValues(outcome).Inc()
}

// setFleet attaches the database the fleet gauges are read from (nil
// detaches it: only the counters are exported then).
func (m *metrics) setFleet(f fleetReader) {
	if m == nil {
		return
	}
	m.fleet.set(f)
}

// handler serves the metrics in the Prometheus exposition formats. A
// collector's error does not fail the scrape: the rest is served.
func (m *metrics) handler() http.Handler {
	return promhttp.HandlerFor(m.gatherer, promhttp.HandlerOpts{
		ErrorLog:      promLogger{m.log},
		ErrorHandling: promhttp.ContinueOnError,
	})
}

// promLogger passes promhttp's errors to the daemon's log.
type promLogger struct{ log *slog.Logger }

func (l promLogger) Println(v ...any) { l.log.Warn("metrics: " + fmt.Sprint(v...)) }

// fleetCollector exports the gauges that describe the fleet, read from the
// database when scraped (at most once per fleetMaxAge). When the database
// cannot be read it serves the last good snapshot, and says so in the log
// once per outage.
type fleetCollector struct {
	names []string
	log   *slog.Logger
	// now, timeout and maxAge are fixed after construction (tests set
	// them).
	now     func() time.Time
	timeout time.Duration
	maxAge  time.Duration

	source atomic.Pointer[fleetBox]

	mu      sync.Mutex // serialises reads: concurrent scrapes share one
	snap    []prometheus.Metric
	nextTry time.Time // no read before this
	failing bool      // the last read failed (logged once)
	edfs    map[int64]map[string]float64

	descs struct {
		rows, lastSuccess, devExplained, shiftScore, shiftSize, edf, predictive, firing *prometheus.Desc
	}
}

// fleetBox lets an interface value live in an atomic.Pointer.
type fleetBox struct{ fleetReader }

func newFleetCollector(names []string, log *slog.Logger) *fleetCollector {
	c := &fleetCollector{
		names:   slices.Clone(names),
		log:     log,
		now:     time.Now,
		timeout: fleetQueryTimeout,
		maxAge:  fleetMaxAge,
		edfs:    map[int64]map[string]float64{},
	}
	model, term := []string{"model"}, []string{"model", "term"}
	d := &c.descs
	d.rows = prometheus.NewDesc(metricRowsFitted,
		"Rows used by the model's latest successful fit.", model, nil)
	d.lastSuccess = prometheus.NewDesc(metricLastSuccess,
		"When the model's latest successful refit finished, in seconds since the Unix epoch.", model, nil)
	d.devExplained = prometheus.NewDesc(metricDevianceExplained,
		"Fraction of the null deviance explained by the model's latest successful fit.", model, nil)
	d.shiftScore = prometheus.NewDesc(metricShiftScore,
		"Largest standardised shift of the term in the model's latest comparison, divided by the simultaneous critical value: above 1 is outside the band.", term, nil)
	d.shiftSize = prometheus.NewDesc(metricShiftSize,
		"Largest absolute shift of the term in the model's latest comparison, on the link scale.", term, nil)
	d.edf = prometheus.NewDesc(metricTermEDF,
		"Effective degrees of freedom of the term in the model's latest successful fit.", term, nil)
	d.predictive = prometheus.NewDesc(metricPredictiveRatio,
		"Predictive deviance ratio of the model's latest comparison: the reference's deviance on the new rows over the new fit's optimism-corrected deviance.", model, nil)
	d.firing = prometheus.NewDesc(metricAlertsFiring,
		"Alerts of the model in the firing state.", model, nil)
	return c
}

func (c *fleetCollector) set(f fleetReader) {
	if f == nil {
		c.source.Store(nil)
		return
	}
	c.source.Store(&fleetBox{f})
}

// Describe implements prometheus.Collector.
func (c *fleetCollector) Describe(ch chan<- *prometheus.Desc) {
	d := &c.descs
	for _, desc := range []*prometheus.Desc{d.rows, d.lastSuccess, d.devExplained, d.shiftScore, d.shiftSize, d.edf, d.predictive, d.firing} {
		ch <- desc
	}
}

// Collect implements prometheus.Collector.
func (c *fleetCollector) Collect(ch chan<- prometheus.Metric) {
	for _, m := range c.snapshot() {
		ch <- m
	}
}

// snapshot returns the current fleet gauges: the cached ones while fresh,
// else a new read, else (the database unreachable) the last good ones. It
// returns nil before a database is attached.
func (c *fleetCollector) snapshot() []prometheus.Metric {
	box := c.source.Load()
	if box == nil || len(c.names) == 0 {
		return nil
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	now := c.now()
	if now.Before(c.nextTry) {
		return c.snap
	}
	c.nextTry = now.Add(c.maxAge)
	ctx, cancel := context.WithTimeout(context.Background(), c.timeout)
	defer cancel()
	snap, err := c.read(ctx, box.fleetReader)
	if err != nil {
		if !c.failing {
			c.failing = true
			c.log.Warn("metrics: cannot read the fleet from the database; serving the last figures read until it answers", "error", err)
		}
		return c.snap
	}
	if c.failing {
		c.failing = false
		c.log.Info("metrics: the fleet is readable again")
	}
	c.snap = snap
	return snap
}

// read reads the fleet and builds its gauges.
func (c *fleetCollector) read(ctx context.Context, fleet fleetReader) ([]prometheus.Metric, error) {
	statuses, err := fleet.Fleet(ctx, c.names)
	if err != nil {
		return nil, err
	}
	// Term EDFs of the latest successful fits; fits never change, so only
	// new fits are read, and fits no longer latest are forgotten.
	current := map[int64]bool{}
	var missing []int64
	for _, s := range statuses {
		if s.LastSuccess == nil {
			continue
		}
		id := s.LastSuccess.ID
		current[id] = true
		if _, ok := c.edfs[id]; !ok {
			missing = append(missing, id)
		}
	}
	if len(missing) > 0 {
		got, err := fleet.TermEDFs(ctx, missing)
		if err != nil {
			return nil, err
		}
		for _, id := range missing {
			c.edfs[id] = got[id] // nil when the fit has none: not asked again
		}
	}
	for id := range c.edfs {
		if !current[id] {
			delete(c.edfs, id)
		}
	}

	d := &c.descs
	var out []prometheus.Metric
	gauge := func(desc *prometheus.Desc, v float64, labels ...string) {
		if math.IsNaN(v) {
			return
		}
		out = append(out, prometheus.MustNewConstMetric(desc, prometheus.GaugeValue, v, labels...))
	}
	for _, s := range statuses {
		if ls := s.LastSuccess; ls != nil {
			gauge(d.rows, float64(ls.RowsUsed), s.Name)
			gauge(d.lastSuccess, float64(ls.Finished.UnixNano())/1e9, s.Name)
			gauge(d.devExplained, ls.DevianceExplained, s.Name)
			for term, edf := range c.edfs[ls.ID] {
				gauge(d.edf, edf, s.Name, term)
			}
		}
		if cmp := s.Comparison; cmp != nil {
			for _, t := range cmp.Terms {
				gauge(d.shiftScore, t.Score, s.Name, t.Term)
				gauge(d.shiftSize, t.Size, s.Name, t.Term)
			}
			gauge(d.predictive, cmp.DegradationRatio, s.Name)
		}
		gauge(d.firing, float64(s.Firing), s.Name)
	}
	return out, nil
}
