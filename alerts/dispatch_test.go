package alerts

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"
)

// clock is a settable clock shared by a test, its outbox and dispatcher.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *clock) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = t
}

func (c *clock) Add(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// memOutbox is an in-memory Outbox with the semantics the interface
// documents: due deliveries oldest first, leases, attempts counted by
// Retry and Abandon.
type memOutbox struct {
	clock *clock
	mu    sync.Mutex
	rows  []*memRow
	// failDelivered makes the next n Delivered calls fail.
	failDelivered int
	claimErr      error
}

type memRow struct {
	d         Delivery
	due       time.Time
	leased    time.Time // hidden until then
	delivered bool
	abandoned bool
	reasons   []string
	nexts     []time.Time
}

func newOutbox(c *clock) *memOutbox { return &memOutbox{clock: c} }

func (o *memOutbox) add(receiver string, a Alert) int64 {
	o.mu.Lock()
	defer o.mu.Unlock()
	id := int64(len(o.rows) + 1)
	o.rows = append(o.rows, &memRow{d: Delivery{ID: id, Receiver: receiver, Alert: a, Created: o.clock.Now()}, due: o.clock.Now()})
	return id
}

func (o *memOutbox) row(id int64) memRow {
	o.mu.Lock()
	defer o.mu.Unlock()
	return *o.rows[id-1]
}

func (o *memOutbox) Claim(ctx context.Context, limit int, lease time.Duration) ([]Delivery, error) {
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.claimErr != nil {
		return nil, o.claimErr
	}
	now := o.clock.Now()
	var out []Delivery
	for _, r := range o.rows {
		if len(out) == limit {
			break
		}
		if r.delivered || r.abandoned || r.due.After(now) || r.leased.After(now) {
			continue
		}
		r.leased = now.Add(lease)
		out = append(out, r.d)
	}
	return out, nil
}

func (o *memOutbox) Delivered(ctx context.Context, id int64) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.failDelivered > 0 {
		o.failDelivered--
		return errors.New("outbox is down")
	}
	o.rows[id-1].delivered = true
	return nil
}

func (o *memOutbox) Retry(ctx context.Context, id int64, next time.Time, reason string) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	r := o.rows[id-1]
	r.d.Attempts++
	r.due, r.leased = next, time.Time{}
	r.reasons = append(r.reasons, reason)
	r.nexts = append(r.nexts, next)
	return nil
}

func (o *memOutbox) Abandon(ctx context.Context, id int64, reason string) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	r := o.rows[id-1]
	r.d.Attempts++
	r.abandoned = true
	r.reasons = append(r.reasons, reason)
	return nil
}

// fakeNotifier answers each Notify with its script (nil: success) and
// records the deliveries it was given.
type fakeNotifier struct {
	name   string
	script func(ctx context.Context, d Delivery) (bool, error)
	mu     sync.Mutex
	got    []Delivery
}

func (n *fakeNotifier) Name() string { return n.name }

func (n *fakeNotifier) Notify(ctx context.Context, d Delivery) (bool, error) {
	n.mu.Lock()
	n.got = append(n.got, d)
	n.mu.Unlock()
	if n.script == nil {
		return false, nil
	}
	return n.script(ctx, d)
}

func (n *fakeNotifier) calls() []Delivery {
	n.mu.Lock()
	defer n.mu.Unlock()
	return slices.Clone(n.got)
}

// outcomes counts OnOutcome calls.
type outcomes struct {
	mu sync.Mutex
	n  map[string]int // "receiver outcome"
}

func (o *outcomes) record(receiver, outcome string) {
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.n == nil {
		o.n = map[string]int{}
	}
	o.n[receiver+" "+outcome]++
}

func (o *outcomes) get(receiver, outcome string) int {
	o.mu.Lock()
	defer o.mu.Unlock()
	return o.n[receiver+" "+outcome]
}

func firingAlert(model string, at time.Time) Alert {
	s, _ := Step(Status{}, Finding{Model: model, Term: "water_temp", Kind: KindCurveShift, Breach: true, Summary: "moved"}, 1, at)
	return NewAlert(s, "")
}

func resolvedAlert(model string, firedAt, at time.Time) Alert {
	prev := Status{Key: Key{Model: model, Term: "water_temp", Kind: KindCurveShift}, State: StateFiring,
		Since: firedAt, FiringSince: firedAt, Consecutive: 1}
	s, _ := Step(prev, Finding{Model: model, Term: "water_temp", Kind: KindCurveShift}, 1, at)
	return NewAlert(s, "")
}

func TestRunOnceDelivers(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	a, b := &fakeNotifier{name: "a"}, &fakeNotifier{name: "b"}
	var outs outcomes
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{a, b}, Now: c.Now, OnOutcome: outs.record})
	ids := []int64{box.add("a", firingAlert("m1", t0)), box.add("b", firingAlert("m1", t0)), box.add("a", firingAlert("m2", t0))}
	res, err := d.RunOnce(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if res != (Result{Claimed: 3, Delivered: 3}) {
		t.Errorf("result %+v", res)
	}
	for _, id := range ids {
		if r := box.row(id); !r.delivered {
			t.Errorf("delivery %d not marked delivered", id)
		}
	}
	if got := a.calls(); len(got) != 2 || got[0].ID != ids[0] || got[1].ID != ids[2] {
		t.Errorf("receiver a got %v, want deliveries %d and %d in order", got, ids[0], ids[2])
	}
	if outs.get("a", OutcomeDelivered) != 2 || outs.get("b", OutcomeDelivered) != 1 {
		t.Errorf("outcomes %v", outs.n)
	}
	// Nothing is due any more.
	if res, err := d.RunOnce(context.Background()); err != nil || res != (Result{}) {
		t.Errorf("second pass: %+v, %v", res, err)
	}
}

func TestRunOnceRetriesWithBackoffThenGivesUp(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	down := &fakeNotifier{name: "down", script: func(context.Context, Delivery) (bool, error) {
		return true, errors.New("503 Service Unavailable")
	}}
	var outs outcomes
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{down}, Now: c.Now, OnOutcome: outs.record,
		RetryMin: 5 * time.Second, RetryMax: time.Minute, GiveUpAfter: 6})
	id := box.add("down", firingAlert("m", t0))
	// Waits after each failed attempt: 5 s·2^(n−1) capped at 1 min.
	// common practice (no source): capped exponential backoff.
	wantBase := []time.Duration{5 * time.Second, 10 * time.Second, 20 * time.Second, 40 * time.Second, time.Minute}
	for n, base := range wantBase {
		res, err := d.RunOnce(context.Background())
		if err != nil || res.Retried != 1 {
			t.Fatalf("attempt %d: %+v, %v", n+1, res, err)
		}
		r := box.row(id)
		wait := r.nexts[n].Sub(c.Now())
		if wait <= base*9/10 || wait > base {
			t.Errorf("attempt %d: waits %v, want in (%v, %v]", n+1, wait, base*9/10, base)
		}
		if wait != d.Backoff(id, n+1) {
			t.Errorf("attempt %d: waits %v, Backoff says %v", n+1, wait, d.Backoff(id, n+1))
		}
		// Not due before its time.
		c.Set(r.nexts[n].Add(-time.Millisecond))
		if res, _ := d.RunOnce(context.Background()); res.Claimed != 0 {
			t.Fatalf("attempt %d: claimed before due", n+1)
		}
		c.Set(r.nexts[n])
	}
	res, err := d.RunOnce(context.Background())
	if err != nil || res.Abandoned != 1 {
		t.Fatalf("sixth attempt: %+v, %v", res, err)
	}
	r := box.row(id)
	if !r.abandoned || r.d.Attempts != 6 {
		t.Errorf("after six failures: abandoned %v attempts %d", r.abandoned, r.d.Attempts)
	}
	if last := r.reasons[len(r.reasons)-1]; !strings.Contains(last, "gave up after 6 attempts") || !strings.Contains(last, "503") {
		t.Errorf("reason %q", last)
	}
	if outs.get("down", OutcomeRetried) != 5 || outs.get("down", OutcomeAbandoned) != 1 {
		t.Errorf("outcomes %v", outs.n)
	}
}

func TestBackoff(t *testing.T) {
	d := NewDispatcher(DispatcherConfig{})
	// Defaults: RetryMin 5 s, RetryMax 10 min (the brief's contract).
	// common practice (no source): capped exponential backoff with jitter.
	for attempts, base := range map[int]time.Duration{
		1: 5 * time.Second, 2: 10 * time.Second, 3: 20 * time.Second, 7: 320 * time.Second,
		8: 10 * time.Minute, 20: 10 * time.Minute, 1000: 10 * time.Minute,
	} {
		seen := map[time.Duration]bool{}
		for id := int64(1); id <= 50; id++ {
			w := d.Backoff(id, attempts)
			if w <= base*9/10 || w > base {
				t.Fatalf("Backoff(%d, %d) = %v, want in (%v, %v]", id, attempts, w, base*9/10, base)
			}
			if w != d.Backoff(id, attempts) {
				t.Fatalf("Backoff(%d, %d) not deterministic", id, attempts)
			}
			seen[w] = true
		}
		if len(seen) < 40 {
			t.Errorf("attempts %d: only %d distinct waits over 50 deliveries: no jitter", attempts, len(seen))
		}
	}
}

func TestRunOnceAbandons(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	refuses := &fakeNotifier{name: "refuses", script: func(context.Context, Delivery) (bool, error) {
		return false, errors.New("400 Bad Request: bad label")
	}}
	var outs outcomes
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{refuses}, Now: c.Now, OnOutcome: outs.record})
	refused := box.add("refuses", firingAlert("m", t0))
	gone := box.add("webhook:http://removed.example/hook", firingAlert("m", t0))
	res, err := d.RunOnce(context.Background())
	if err != nil || res != (Result{Claimed: 2, Abandoned: 2}) {
		t.Fatalf("%+v, %v", res, err)
	}
	if r := box.row(refused); !r.abandoned || r.d.Attempts != 1 || !strings.Contains(r.reasons[0], "bad label") {
		t.Errorf("refused: %+v", r)
	}
	if r := box.row(gone); !r.abandoned || !strings.Contains(r.reasons[0], "not configured") {
		t.Errorf("unknown receiver: %+v", r)
	}
	if outs.get("webhook:http://removed.example/hook", OutcomeAbandoned) != 1 {
		t.Errorf("outcomes %v", outs.n)
	}
}

func TestFailingReceiverDoesNotBlockOthers(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	// "stuck" hangs until its call times out; "fine" must be served
	// meanwhile.
	release := make(chan struct{})
	stuck := &fakeNotifier{name: "stuck", script: func(ctx context.Context, _ Delivery) (bool, error) {
		select {
		case <-release:
			return true, errors.New("gave up waiting")
		case <-ctx.Done():
			return true, ctx.Err()
		}
	}}
	fine := &fakeNotifier{name: "fine"}
	fineDone := make(chan struct{}, 4)
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{stuck, fine}, Now: c.Now,
		OnOutcome: func(receiver, outcome string) {
			if receiver == "fine" && outcome == OutcomeDelivered {
				fineDone <- struct{}{}
			}
		}})
	box.add("stuck", firingAlert("m1", t0))
	box.add("stuck", firingAlert("m2", t0))
	box.add("fine", firingAlert("m1", t0))
	box.add("fine", firingAlert("m2", t0))
	type out struct {
		res Result
		err error
	}
	done := make(chan out, 1)
	go func() {
		res, err := d.RunOnce(context.Background())
		done <- out{res, err}
	}()
	// Both of fine's deliveries arrive while stuck still hangs.
	<-fineDone
	<-fineDone
	close(release)
	o := <-done
	if o.err != nil || o.res.Delivered != 2 || o.res.Retried != 2 {
		t.Errorf("%+v", o)
	}
}

func TestNotifyTimeout(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	hangs := &fakeNotifier{name: "hangs", script: func(ctx context.Context, _ Delivery) (bool, error) {
		<-ctx.Done()
		return true, fmt.Errorf("post: %w", ctx.Err())
	}}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{hangs}, Now: c.Now, NotifyTimeout: 20 * time.Millisecond})
	id := box.add("hangs", firingAlert("m", t0))
	res, err := d.RunOnce(context.Background())
	if err != nil || res.Retried != 1 {
		t.Fatalf("%+v, %v", res, err)
	}
	if r := box.row(id); !strings.Contains(r.reasons[0], "deadline exceeded") {
		t.Errorf("reason %q", r.reasons[0])
	}
}

func TestLaterChangeWaitsBehindRetriedOne(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	fail := true
	n := &fakeNotifier{name: "am", script: func(_ context.Context, d Delivery) (bool, error) {
		if fail {
			return true, errors.New("connection refused")
		}
		return false, nil
	}}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{n}, Now: c.Now})
	firing := box.add("am", firingAlert("m", t0))
	other := box.add("am", firingAlert("other", t0))
	resolved := box.add("am", resolvedAlert("m", t0, t0.Add(time.Minute)))
	res, err := d.RunOnce(context.Background())
	if err != nil || res.Retried != 3 {
		t.Fatalf("%+v, %v", res, err)
	}
	// The resolution was not sent while its firing waits.
	for _, got := range n.calls() {
		if got.ID == resolved {
			t.Fatalf("resolution sent before its firing was delivered")
		}
	}
	f, r := box.row(firing), box.row(resolved)
	if !r.due.Equal(f.due) || !strings.Contains(r.reasons[0], fmt.Sprintf("held behind delivery %d", firing)) {
		t.Errorf("held resolution due %v (firing due %v), reason %q", r.due, f.due, r.reasons[0])
	}
	fail = false
	c.Set(box.row(other).due.Add(time.Hour))
	if res, err := d.RunOnce(context.Background()); err != nil || res.Delivered != 3 {
		t.Fatalf("second pass: %+v, %v", res, err)
	}
	var order []int64
	for _, got := range n.calls()[2:] { // after the first pass's two sends
		order = append(order, got.ID)
	}
	if want := []int64{firing, other, resolved}; !slices.Equal(order, want) {
		t.Errorf("second pass sent %v, want %v", order, want)
	}
}

func TestLeaseBudget(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	// Each send takes 40 s of the 1 min lease; with a 10 s timeout a send
	// may start until 50 s into the lease, so the third one is left.
	slow := &fakeNotifier{name: "slow", script: func(context.Context, Delivery) (bool, error) {
		c.Add(40 * time.Second)
		return false, nil
	}}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{slow}, Now: c.Now,
		Lease: time.Minute, NotifyTimeout: 10 * time.Second})
	for range 3 {
		box.add("slow", firingAlert("m", t0))
	}
	res, err := d.RunOnce(context.Background())
	if err != nil || res != (Result{Claimed: 3, Delivered: 2}) {
		t.Fatalf("%+v, %v", res, err)
	}
	if r := box.row(3); r.delivered || r.d.Attempts != 0 {
		t.Errorf("third delivery: %+v, want untouched", r)
	}
	// It comes back once its lease has run out.
	c.Set(t0.Add(time.Minute))
	if res, err := d.RunOnce(context.Background()); err != nil || res.Delivered != 1 {
		t.Errorf("after the lease: %+v, %v", res, err)
	}
}

func TestRunOnceCancelledIsNoAttempt(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	ctx, cancel := context.WithCancel(context.Background())
	hangs := &fakeNotifier{name: "hangs", script: func(ctx context.Context, _ Delivery) (bool, error) {
		cancel()
		<-ctx.Done()
		return true, ctx.Err()
	}}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{hangs}, Now: c.Now})
	box.add("hangs", firingAlert("m", t0))
	box.add("hangs", firingAlert("n", t0))
	res, err := d.RunOnce(ctx)
	if err != nil || res != (Result{Claimed: 2}) {
		t.Fatalf("%+v, %v", res, err)
	}
	if r := box.row(1); r.d.Attempts != 0 || len(hangs.calls()) != 1 {
		t.Errorf("cancelled pass recorded an attempt (%d) or kept sending (%d calls)", r.d.Attempts, len(hangs.calls()))
	}
}

func TestRunOnceRecordFailure(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	box.failDelivered = 1
	n := &fakeNotifier{name: "n"}
	var outs outcomes
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{n}, Now: c.Now, OnOutcome: outs.record})
	box.add("n", firingAlert("m", t0))
	res, err := d.RunOnce(context.Background())
	if err == nil || !strings.Contains(err.Error(), "outbox is down") || res.Delivered != 0 {
		t.Fatalf("%+v, %v", res, err)
	}
	if outs.get("n", OutcomeDelivered) != 0 {
		t.Errorf("an unrecorded attempt was counted")
	}
	box.claimErr = errors.New("no database")
	if _, err := d.RunOnce(context.Background()); !errors.Is(err, box.claimErr) {
		t.Errorf("claim failure: %v", err)
	}
}

func TestNotifierPanicIsRetried(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	n := &fakeNotifier{name: "n", script: func(context.Context, Delivery) (bool, error) { panic("boom") }}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{n}, Now: c.Now})
	box.add("n", firingAlert("m", t0))
	res, err := d.RunOnce(context.Background())
	if err != nil || res.Retried != 1 || !strings.Contains(box.row(1).reasons[0], "panicked: boom") {
		t.Errorf("%+v, %v, %v", res, err, box.row(1).reasons)
	}
}

func TestDispatcherConfigErrors(t *testing.T) {
	if err := NewDispatcher(DispatcherConfig{}).Start(context.Background()); err == nil {
		t.Error("Start without an outbox: no error")
	}
	box := newOutbox(&clock{t: t0})
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{&fakeNotifier{name: "x"}, &fakeNotifier{name: "x"}}})
	if _, err := d.RunOnce(context.Background()); err == nil || !strings.Contains(err.Error(), `"x"`) {
		t.Errorf("duplicate receiver names: %v", err)
	}
}

func TestDispatcherStartStop(t *testing.T) {
	c := &clock{t: t0}
	box := newOutbox(c)
	delivered := make(chan struct{}, 16)
	n := &fakeNotifier{name: "n"}
	d := NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{n}, Now: c.Now,
		Every: time.Hour, Batch: 2,
		OnOutcome: func(_, outcome string) {
			if outcome == OutcomeDelivered {
				delivered <- struct{}{}
			}
		}})
	d.Stop() // before Start: harmless
	ctx := t.Context()
	if err := d.Start(ctx); err != nil {
		t.Fatal(err)
	}
	if err := d.Start(ctx); err != nil { // already running: nothing
		t.Fatal(err)
	}
	// Five deliveries with a batch of two and an hour between polls: the
	// full batches are followed at once by more passes after one Kick.
	for range 5 {
		box.add("n", firingAlert("m", t0))
	}
	d.Kick()
	d.Kick() // coalesces, never blocks
	for range 5 {
		<-delivered
	}
	d.Stop()
	d.Stop() // twice: harmless

	// Restartable, and Kick while stopped does not block.
	d.Kick()
	if err := d.Start(ctx); err != nil {
		t.Fatal(err)
	}
	box.add("n", firingAlert("m", t0))
	d.Kick()
	<-delivered
	var wg sync.WaitGroup
	for range 3 { // concurrent Stops all return once the loop has ended
		wg.Go(d.Stop)
	}
	wg.Wait()
	if got := len(n.calls()); got != 6 {
		t.Errorf("%d sends, want 6", got)
	}
}

func TestDispatcherStopsWithContext(t *testing.T) {
	box := newOutbox(&clock{t: t0})
	d := NewDispatcher(DispatcherConfig{Outbox: box, Every: time.Hour})
	ctx, cancel := context.WithCancel(context.Background())
	if err := d.Start(ctx); err != nil {
		t.Fatal(err)
	}
	cancel()
	d.Stop() // returns once the loop has ended
	// A Dispatcher whose context ended can be started again.
	delivered := make(chan struct{}, 1)
	n := &fakeNotifier{name: "n", script: func(context.Context, Delivery) (bool, error) {
		delivered <- struct{}{}
		return false, nil
	}}
	d = NewDispatcher(DispatcherConfig{Outbox: box, Notifiers: []Notifier{n}, Every: time.Hour})
	ctx2, cancel2 := context.WithCancel(context.Background())
	if err := d.Start(ctx2); err != nil {
		t.Fatal(err)
	}
	cancel2()
	d.mu.Lock()
	done := d.done
	d.mu.Unlock()
	<-done
	if err := d.Start(context.Background()); err != nil {
		t.Fatal(err)
	}
	defer d.Stop()
	box.add("n", firingAlert("m", t0))
	d.Kick()
	<-delivered
}
