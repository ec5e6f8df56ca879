package daemon

import (
	"context"
	"net/http"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/alerts/alertmanager"
	"github.com/curvewatch/curvewatch/alerts/webhook"
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

// newDelivery builds the receivers named in the config's alerting section.
func (a *App) newDelivery(store *history.Store) *delivery {
	client := &http.Client{Timeout: 15 * time.Second}
	var notifiers []alerts.Notifier
	d := &delivery{}
	for _, u := range a.cfg.Alerting.Alertmanager {
		n := alertmanager.New(u, client)
		n.Horizon = alertmanager.HorizonFor(a.cfg.Alerting.ResendEvery)
		d.managers = append(d.managers, n)
		notifiers = append(notifiers, n)
	}
	for _, w := range a.cfg.Alerting.Webhooks {
		notifiers = append(notifiers, webhook.New(w.URL, w.Secret.Reveal(), client))
	}
	names := make([]string, len(notifiers))
	for i, n := range notifiers {
		names[i] = n.Name()
	}
	d.alerter = newAlerter(a.cfg, store, names)
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
