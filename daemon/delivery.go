package daemon

import (
	"context"
	"net/http"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/alerts/alertmanager"
	"github.com/curvewatch/curvewatch/alerts/webhook"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// delivery is the alerting side of the App once the store is open: the
// alerter (the refits' hook), the dispatcher that empties the outbox, and
// the loop that re-sends firing alerts to Alertmanager so that they do not
// expire there.
type delivery struct {
	alerter    *alerter
	dispatcher *alerts.Dispatcher
	managers   []*alertmanager.Notifier
	cancel     context.CancelFunc
	done       chan struct{}
}

// notifiers builds the receivers named in the config's alerting section.
func notifiers(cfg *config.Config) ([]alerts.Notifier, []*alertmanager.Notifier) {
	client := &http.Client{Timeout: 15 * time.Second}
	var all []alerts.Notifier
	var managers []*alertmanager.Notifier
	for _, u := range cfg.Alerting.Alertmanager {
		n := alertmanager.New(u, client)
		n.Horizon = alertmanager.HorizonFor(cfg.Alerting.ResendEvery)
		managers = append(managers, n)
		all = append(all, n)
	}
	for _, w := range cfg.Alerting.Webhooks {
		all = append(all, webhook.New(w.URL, w.Secret.Reveal(), client))
	}
	return all, managers
}

func receiverNames(ns []alerts.Notifier) []string {
	names := make([]string, len(ns))
	for i, n := range ns {
		names[i] = n.Name()
	}
	return names
}

// AlertHook returns the hook (for jobs.Runner.OnRecord) that updates the
// refitted model's alert states in the refit's transaction and queues the
// deliveries, exactly as the daemon's refits do. The running daemon's
// dispatcher sends what it queues; `curvewatch run` uses it.
func AlertHook(cfg *config.Config, store *history.Store) func(ctx context.Context, tx pgx.Tx, res *jobs.Result) error {
	ns, _ := notifiers(cfg)
	return newAlerter(cfg, store, receiverNames(ns)).onRecord
}

// newDelivery builds the alert side over the store.
func (a *App) newDelivery(store *history.Store) *delivery {
	notifiers, managers := notifiers(a.cfg)
	d := &delivery{managers: managers}
	d.alerter = newAlerter(a.cfg, store, receiverNames(notifiers))
	d.dispatcher = alerts.NewDispatcher(alerts.DispatcherConfig{
		Outbox: store.Outbox(), Notifiers: notifiers, Logger: a.log,
		RetryMin: a.opts.DeliveryRetryMin,
		OnOutcome: func(receiver, outcome string) {
			a.metrics.observeDelivery(receiver, outcome)
		},
	})
	return d
}

// start starts the dispatcher and the resend loop.
func (d *delivery) start(a *App, store *history.Store) error {
	if err := d.dispatcher.Start(context.Background()); err != nil {
		return err
	}
	ctx, cancel := context.WithCancel(context.Background())
	d.cancel, d.done = cancel, make(chan struct{})
	go func() {
		defer close(d.done)
		if len(d.managers) == 0 {
			return
		}
		tick := time.NewTicker(a.cfg.Alerting.ResendEvery)
		defer tick.Stop()
		// At once first: a restarted daemon renews what it left firing.
		d.resend(ctx, a, store)
		for {
			select {
			case <-ctx.Done():
				return
			case <-tick.C:
				d.resend(ctx, a, store)
			}
		}
	}()
	return nil
}

// resend posts every firing alert to every Alertmanager again, with a
// fresh endsAt. Replicas all do it; Alertmanager merges repeats.
func (d *delivery) resend(ctx context.Context, a *App, store *history.Store) {
	ctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	firing, err := store.FiringAlerts(ctx)
	if err != nil {
		if ctx.Err() == nil {
			a.log.Warn("re-sending firing alerts: cannot read them; trying again later", "error", a.scrub(err.Error()))
		}
		return
	}
	if len(firing) == 0 {
		return
	}
	out := make([]alerts.Alert, len(firing))
	for i, s := range firing {
		out[i] = alerts.NewAlert(s, a.cfg.PublicURL)
	}
	for _, n := range d.managers {
		if err := n.Resend(ctx, out); err != nil {
			a.log.Warn("re-sending firing alerts failed; trying again next time", "receiver", n.Name(), "error", err)
		}
	}
}

// stop stops the resend loop and the dispatcher (a delivery in flight is
// left to be claimed again after its lease).
func (d *delivery) stop() {
	if d.cancel != nil {
		d.cancel()
		<-d.done
	}
	d.dispatcher.Stop()
}

// kick asks the dispatcher for a pass soon (after a refit queued
// deliveries).
func (d *delivery) kick() {
	if d != nil {
		d.dispatcher.Kick()
	}
}
