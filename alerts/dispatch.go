package alerts

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"time"
	"unicode/utf8"
)

// Dispatcher defaults; see DispatcherConfig.
const (
	DefaultDispatchEvery = 2 * time.Second
	DefaultDispatchBatch = 50
	DefaultDispatchLease = time.Minute
	DefaultRetryMin      = 5 * time.Second
	DefaultRetryMax      = 10 * time.Minute
	DefaultGiveUpAfter   = 20
	DefaultNotifyTimeout = 10 * time.Second
)

// Outcomes of one delivery attempt, as passed to DispatcherConfig.OnOutcome
// (the outcome label of curvewatch_alert_deliveries_total).
const (
	OutcomeDelivered = "delivered"
	OutcomeRetried   = "retried"
	OutcomeAbandoned = "abandoned"
)

// outboxTimeout bounds each outbox call. The calls that record an attempt
// run even while the dispatcher is stopping, so that a delivery that was
// sent is also marked.
const outboxTimeout = 10 * time.Second

// maxReason is the longest failure reason handed to the outbox, in bytes.
const maxReason = 1000

// DispatcherConfig configures a Dispatcher. Durations and counts that are 0
// (or negative) take their defaults.
type DispatcherConfig struct {
	// Outbox is the queue of deliveries; required. It must be safe for
	// concurrent use.
	Outbox Outbox
	// Notifiers are the configured receivers, matched to deliveries by
	// Name; names must be distinct. A delivery whose receiver is not among
	// them (it was removed from the config) is abandoned.
	Notifiers []Notifier
	// Logger receives one line per failed attempt; nil discards.
	Logger *slog.Logger
	// Every is how often the outbox is polled (default 2 s). Kick starts a
	// pass sooner, and a pass that claimed a full batch is followed at once
	// by another.
	Every time.Duration
	// Batch is the most deliveries claimed per pass (default 50).
	Batch int
	// Lease is how long claimed deliveries stay hidden from other
	// dispatchers (default 1 min). A pass starts no send that could not
	// finish within the lease; what it leaves is claimed again after the
	// lease runs out.
	Lease time.Duration
	// RetryMin and RetryMax bound the wait before a failed delivery is
	// tried again: after the n-th failed attempt (n ≥ 1) it is
	// min(RetryMin·2ⁿ⁻¹, RetryMax), shortened by a deterministic jitter of
	// up to a tenth so that deliveries that failed together spread out
	// (defaults 5 s and 10 min).
	RetryMin, RetryMax time.Duration
	// GiveUpAfter is the number of failed attempts after which a delivery
	// is abandoned (default 20: with the default waits, about two and a
	// half hours of failures).
	GiveUpAfter int
	// NotifyTimeout bounds each Notify call (default 10 s).
	NotifyTimeout time.Duration
	// OnOutcome, when set, is called once per recorded attempt with the
	// receiver's name and OutcomeDelivered, OutcomeRetried or
	// OutcomeAbandoned (the daemon counts them in
	// curvewatch_alert_deliveries_total{outcome}). It is called from
	// several goroutines at once.
	OnOutcome func(receiver, outcome string)
	// Now is the clock (default time.Now).
	Now func() time.Time
}

// Result is what one pass over the outbox did.
type Result struct {
	// Claimed counts the deliveries claimed.
	Claimed int
	// Delivered, Retried and Abandoned count the attempts recorded with
	// each outcome. Claimed deliveries that were not attempted (the pass
	// was cancelled, or the lease ran short) are in none of them.
	Delivered, Retried, Abandoned int
}

func (r *Result) add(o Result) {
	r.Delivered += o.Delivered
	r.Retried += o.Retried
	r.Abandoned += o.Abandoned
}

// Dispatcher sends the deliveries queued in an Outbox to their receivers,
// retrying failures with exponential backoff. Each receiver's deliveries
// are sent in claim order by a goroutine of their own, so a slow or failing
// receiver holds up no other; within a receiver, a later change of an alert
// is not sent while an earlier change of the same alert waits to be retried
// (a resolution never overtakes its firing).
//
// Start runs passes in the background until Stop; RunOnce runs one pass.
type Dispatcher struct {
	cfg       DispatcherConfig
	log       *slog.Logger
	now       func() time.Time
	notifiers map[string]Notifier
	configErr error
	kick      chan struct{}

	mu     sync.Mutex
	cancel context.CancelFunc // nil when not running
	done   chan struct{}      // closed when the loop has returned
}

// NewDispatcher returns a Dispatcher with cfg's defaults filled in. A
// configuration problem (no outbox, two notifiers of one name) is reported
// by Start and RunOnce.
func NewDispatcher(cfg DispatcherConfig) *Dispatcher {
	cfg.Every = positive(cfg.Every, DefaultDispatchEvery)
	cfg.Batch = positive(cfg.Batch, DefaultDispatchBatch)
	cfg.Lease = positive(cfg.Lease, DefaultDispatchLease)
	cfg.RetryMin = positive(cfg.RetryMin, DefaultRetryMin)
	cfg.RetryMax = max(positive(cfg.RetryMax, DefaultRetryMax), cfg.RetryMin)
	cfg.GiveUpAfter = positive(cfg.GiveUpAfter, DefaultGiveUpAfter)
	cfg.NotifyTimeout = positive(cfg.NotifyTimeout, DefaultNotifyTimeout)
	// A send must be able to finish within the lease.
	cfg.NotifyTimeout = min(cfg.NotifyTimeout, cfg.Lease/2)
	d := &Dispatcher{
		cfg:       cfg,
		log:       cmp.Or(cfg.Logger, slog.New(slog.DiscardHandler)),
		now:       cfg.Now,
		notifiers: make(map[string]Notifier, len(cfg.Notifiers)),
		kick:      make(chan struct{}, 1),
	}
	if d.now == nil {
		d.now = time.Now
	}
	if cfg.Outbox == nil {
		d.configErr = errors.New("alerts: dispatcher: no outbox")
	}
	for _, n := range cfg.Notifiers {
		name := n.Name()
		if _, dup := d.notifiers[name]; dup {
			d.configErr = errors.Join(d.configErr, fmt.Errorf("alerts: dispatcher: two receivers are named %q", name))
		}
		d.notifiers[name] = n
	}
	return d
}

func positive[T int | time.Duration](v, def T) T {
	if v <= 0 {
		return def
	}
	return v
}

// Start runs passes in the background: one at once, then every Every, on
// Kick, and straight after a pass that claimed a full batch, until ctx is
// cancelled or Stop is called. Starting a running Dispatcher does nothing;
// a stopped one may be started again. A failed pass is logged and the next
// one runs as usual.
func (d *Dispatcher) Start(ctx context.Context) error {
	if d.configErr != nil {
		return d.configErr
	}
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.cancel != nil {
		select {
		case <-d.done: // the loop ended with its context: start afresh
			d.cancel()
		default:
			return nil
		}
	}
	ctx, cancel := context.WithCancel(ctx)
	done := make(chan struct{})
	d.cancel, d.done = cancel, done
	go func() {
		defer close(done)
		d.loop(ctx)
	}()
	return nil
}

// Stop stops the background passes and returns once the current pass has
// ended (its in-flight sends are cancelled, and are not counted as
// attempts). Stopping a Dispatcher that was never started, or is already
// stopped, does nothing.
func (d *Dispatcher) Stop() {
	d.mu.Lock()
	cancel, done := d.cancel, d.done
	d.cancel = nil
	d.mu.Unlock()
	if cancel == nil {
		if done != nil {
			<-done // a concurrent Stop may still be waiting
		}
		return
	}
	cancel()
	<-done
}

// Kick asks for a pass soon (say, right after new deliveries were queued).
// It never blocks, and kicks that arrive during a pass coalesce into one
// more pass.
func (d *Dispatcher) Kick() {
	select {
	case d.kick <- struct{}{}:
	default:
	}
}

func (d *Dispatcher) loop(ctx context.Context) {
	timer := time.NewTimer(0)
	defer timer.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-timer.C:
		case <-d.kick:
		}
		res, err := d.RunOnce(ctx)
		if ctx.Err() != nil {
			return
		}
		next := d.cfg.Every
		if err != nil {
			d.log.Warn("alert delivery pass failed", "err", err)
		} else if res.Claimed >= d.cfg.Batch {
			next = 0 // more are probably waiting
		}
		timer.Reset(next)
	}
}

// RunOnce claims up to Batch due deliveries and attempts each once, every
// receiver's deliveries concurrently with the others'. It records every
// attempt in the outbox and returns what it did; its error joins the
// failures to claim or record (a send that fails is an outcome, not an
// error). When ctx is cancelled, sends stop and the deliveries not
// attempted stay claimed until their lease runs out.
func (d *Dispatcher) RunOnce(ctx context.Context) (Result, error) {
	if d.configErr != nil {
		return Result{}, d.configErr
	}
	claimedAt := d.now()
	claimed, err := d.cfg.Outbox.Claim(ctx, d.cfg.Batch, d.cfg.Lease)
	if err != nil {
		return Result{}, fmt.Errorf("alerts: claim deliveries: %w", err)
	}
	res := Result{Claimed: len(claimed)}
	if len(claimed) == 0 {
		return res, nil
	}
	// The last moment a send may start and still end within the lease.
	sendBy := claimedAt.Add(d.cfg.Lease - d.cfg.NotifyTimeout)

	var order []string
	byReceiver := map[string][]Delivery{}
	for _, dl := range claimed {
		if _, ok := byReceiver[dl.Receiver]; !ok {
			order = append(order, dl.Receiver)
		}
		byReceiver[dl.Receiver] = append(byReceiver[dl.Receiver], dl)
	}
	results := make([]Result, len(order))
	errs := make([]error, len(order))
	var wg sync.WaitGroup
	for i, name := range order {
		wg.Go(func() {
			results[i], errs[i] = d.sendAll(ctx, name, byReceiver[name], sendBy)
		})
	}
	wg.Wait()
	for _, r := range results {
		res.add(r)
	}
	return res, errors.Join(errs...)
}

// sendAll attempts one receiver's deliveries in order.
func (d *Dispatcher) sendAll(ctx context.Context, receiver string, ds []Delivery, sendBy time.Time) (Result, error) {
	var res Result
	var errs []error
	record := func(dl Delivery, outcome string, f func(context.Context) error) {
		// Recorded even when ctx is cancelled: the attempt happened.
		rctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), outboxTimeout)
		defer cancel()
		if err := f(rctx); err != nil {
			errs = append(errs, fmt.Errorf("alerts: record delivery %d to %s as %s: %w", dl.ID, receiver, outcome, err))
			return
		}
		switch outcome {
		case OutcomeDelivered:
			res.Delivered++
		case OutcomeRetried:
			res.Retried++
		case OutcomeAbandoned:
			res.Abandoned++
		}
		if d.cfg.OnOutcome != nil {
			d.cfg.OnOutcome(receiver, outcome)
		}
	}
	abandon := func(dl Delivery, reason string) {
		reason = clip(reason)
		d.log.Error("alert delivery abandoned", "receiver", receiver, "delivery", dl.ID,
			"alert", dl.Alert.Key.String(), "state", dl.Alert.State, "attempts", dl.Attempts+1, "reason", reason)
		record(dl, OutcomeAbandoned, func(ctx context.Context) error { return d.cfg.Outbox.Abandon(ctx, dl.ID, reason) })
	}
	retry := func(dl Delivery, next time.Time, reason string) {
		reason = clip(reason)
		d.log.Warn("alert delivery will be retried", "receiver", receiver, "delivery", dl.ID,
			"alert", dl.Alert.Key.String(), "state", dl.Alert.State, "attempts", dl.Attempts+1,
			"next", next, "reason", reason)
		record(dl, OutcomeRetried, func(ctx context.Context) error { return d.cfg.Outbox.Retry(ctx, dl.ID, next, reason) })
	}

	n, ok := d.notifiers[receiver]
	if !ok {
		for _, dl := range ds {
			abandon(dl, fmt.Sprintf("receiver %q is not configured (removed from the config?)", receiver))
		}
		return res, errors.Join(errs...)
	}

	// held maps an alert whose earlier change waits to be retried to that
	// delivery and the time it is due again.
	type hold struct {
		id   int64
		next time.Time
	}
	held := map[Key]hold{}
	for _, dl := range ds {
		if ctx.Err() != nil {
			break
		}
		if h, ok := held[dl.Alert.Key]; ok {
			retry(dl, h.next, fmt.Sprintf("held behind delivery %d, an earlier change of the same alert that waits to be retried", h.id))
			continue
		}
		if d.now().After(sendBy) {
			d.log.Debug("alert deliveries left for a later pass: the lease runs short", "receiver", receiver)
			break
		}
		again, err := d.notify(ctx, n, dl)
		if err != nil && ctx.Err() != nil {
			break // stopping: this was no fair attempt
		}
		switch attempts := dl.Attempts + 1; {
		case err == nil:
			record(dl, OutcomeDelivered, func(ctx context.Context) error { return d.cfg.Outbox.Delivered(ctx, dl.ID) })
		case !again:
			abandon(dl, fmt.Sprintf("refused, not retried: %v", err))
		case attempts >= d.cfg.GiveUpAfter:
			abandon(dl, fmt.Sprintf("gave up after %d attempts: %v", attempts, err))
		default:
			next := d.now().Add(d.Backoff(dl.ID, attempts))
			held[dl.Alert.Key] = hold{id: dl.ID, next: next}
			retry(dl, next, err.Error())
		}
	}
	return res, errors.Join(errs...)
}

// notify makes one Notify call under NotifyTimeout. A panicking notifier
// is a failed attempt that may be retried, not a crashed daemon.
func (d *Dispatcher) notify(ctx context.Context, n Notifier, dl Delivery) (retry bool, err error) {
	ctx, cancel := context.WithTimeout(ctx, d.cfg.NotifyTimeout)
	defer cancel()
	defer func() {
		if p := recover(); p != nil {
			retry, err = true, fmt.Errorf("notifier %s panicked: %v", n.Name(), p)
		}
	}()
	return n.Notify(ctx, dl)
}

// Backoff is the wait before delivery id is tried again after its
// attempts-th failed attempt (attempts ≥ 1): base = min(RetryMin·2^(attempts−1),
// RetryMax), less a jitter of up to base/10 that depends only on id and
// attempts, so the wait lies in (0.9·base, base].
func (d *Dispatcher) Backoff(id int64, attempts int) time.Duration {
	base := d.cfg.RetryMin
	for i := 1; i < attempts && base < d.cfg.RetryMax; i++ {
		base *= 2
	}
	base = min(base, d.cfg.RetryMax)
	// splitmix64 (Steele, Lea & Flood 2014) of id and attempts, as a
	// fraction in [0, 1).
	x := uint64(id)*0x9e3779b97f4a7c15 + uint64(attempts)
	x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9
	x = (x ^ (x >> 27)) * 0x94d049bb133111eb
	x ^= x >> 31
	frac := float64(x>>11) / (1 << 53)
	return base - time.Duration(frac*float64(base/10))
}

// clip shortens a failure reason to maxReason bytes on a rune boundary.
func clip(s string) string {
	if len(s) <= maxReason {
		return s
	}
	i := maxReason
	for i > 0 && !utf8.RuneStart(s[i]) {
		i--
	}
	return s[:i] + "…"
}
