package main

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/jobs/history"
)

// demoPoll is how often the demo reads the history for new refits.
const demoPoll = 250 * time.Millisecond

// watch prints a line per new refit, read from the history, until ctx is
// done or --for has passed, then the recap.
func (d *demoRun) watch(ctx context.Context) error {
	var until <-chan time.Time
	if d.args.runFor > 0 {
		t := time.NewTimer(time.Until(d.started.Add(d.args.runFor)))
		defer t.Stop()
		until = t.C
	}
	tick := time.NewTicker(demoPoll)
	defer tick.Stop()
	last := d.baseline
	quiet := time.Now()
	for {
		select {
		case <-ctx.Done():
			d.out.line("stopping: interrupted")
			d.recapWanted = true
			return nil
		case <-until:
			d.out.line("stopping: --for %s has passed", d.args.runFor)
			d.recapWanted = true
			return nil
		case <-d.feed.stopped():
			if err := d.feed.failed(); err != nil {
				return err
			}
			return errors.New("the feed stopped")
		case <-tick.C:
		}
		n, err := d.progress(ctx, last)
		if err != nil {
			if ctx.Err() != nil {
				continue
			}
			return err
		}
		if n > last {
			last, quiet = n, time.Now()
		} else if time.Since(quiet) > 3*d.args.every+5*time.Second {
			d.out.line("no new refit for %s; still feeding (%s readings so far)", time.Since(quiet).Round(time.Second), count(int(d.feed.rows.Load())))
			quiet = time.Now()
		}
	}
}

// progress prints the refits recorded after fit last, oldest first, and
// returns the newest fit id seen.
func (d *demoRun) progress(ctx context.Context, last int64) (int64, error) {
	fleet, err := d.store.Fleet(ctx, []string{demoModel})
	if err != nil {
		return last, err
	}
	if len(fleet) == 0 || fleet[0].LastFit == nil || fleet[0].LastFit.ID <= last {
		return last, nil
	}
	status := fleet[0]
	fits, err := d.store.Fits(ctx, demoModel, 50, 0)
	if err != nil {
		return last, err
	}
	var fresh []history.StoredFit
	var ids []int64
	for _, f := range fits {
		if f.ID > last {
			fresh = append(fresh, f)
			ids = append(ids, f.ID)
		}
	}
	slices.Reverse(fresh)
	verdicts, err := d.store.Verdicts(ctx, demoModel, ids)
	if err != nil {
		return last, err
	}
	sim := time.Unix(d.feed.simNow.Load(), 0).UTC().Format("Jan 02 15:04")
	fed := count(int(d.feed.rows.Load()))
	for i, f := range fresh {
		var b strings.Builder
		fmt.Fprintf(&b, "fit %-4d sim %s  fed %s  ", f.ID, sim, fed)
		if f.Status == history.StatusFailed {
			fmt.Fprintf(&b, "failed: %s", f.Reason)
		} else {
			fmt.Fprintf(&b, "rows %s  explained %.1f%%  ", count(int(f.RowsUsed)), 100*f.DevianceExplained)
			if v, ok := verdicts[f.ID]; ok {
				b.WriteString(v.Text())
			} else {
				b.WriteString("not compared")
			}
		}
		if i == len(fresh)-1 && (status.Pending > 0 || status.Firing > 0) {
			fmt.Fprintf(&b, "  (alerts: %d pending, %d firing)", status.Pending, status.Firing)
		}
		d.out.line("%s", b.String())
		last = max(last, f.ID)
	}
	return last, nil
}

// recap prints what happened, from the history and the sink, once the
// daemon and the feed have stopped (it runs among the cleanups) and when
// the demo got as far as watching.
func (d *demoRun) recap(ctx context.Context) error {
	if !d.recapWanted {
		return nil
	}
	ctx, cancel := context.WithTimeout(ctx, demoStopTimeout)
	defer cancel()
	var fits, succeeded, comparisons, breaches int
	var alertsOpen int
	err := d.pool.QueryRow(ctx, `
		SELECT (SELECT count(*) FROM `+d.table("fits")+` WHERE model = $1),
		       (SELECT count(*) FROM `+d.table("fits")+` WHERE model = $1 AND status = 'succeeded'),
		       (SELECT count(*) FROM `+d.table("comparisons")+` WHERE model = $1),
		       (SELECT count(*) FROM `+d.table("comparisons")+` WHERE model = $1 AND breach),
		       (SELECT count(*) FROM `+d.table("alert_states")+` WHERE model = $1 AND state = 'firing')`,
		demoModel).Scan(&fits, &succeeded, &comparisons, &breaches, &alertsOpen)
	if err != nil {
		return fmt.Errorf("read the recap from the history: %w", err)
	}
	firing, resolved, rejected := d.sink.counts()
	d.out.text("\nRecap\n")
	d.out.text("  fits         %d recorded, %d succeeded (the baseline included)\n", fits, succeeded)
	d.out.text("  comparisons  %d with the baseline, %d breached\n", comparisons, breaches)
	d.out.text("  alerts       %d fired, %d resolved, delivered to the webhook sink; %d still firing\n", firing, resolved, alertsOpen)
	if rejected > 0 {
		d.out.text("               %d deliveries refused: their signature did not verify\n", rejected)
	}
	d.out.text("  readings     %s back-filled, %s fed live; simulated time reached %s\n",
		count(int(d.backfilled)), count(int(d.feed.rows.Load())), time.Unix(d.feed.simNow.Load(), 0).UTC().Format(simFormat))
	return nil
}

// table is the daemon's table name, quoted.
func (d *demoRun) table(name string) string {
	return pgx.Identifier{d.args.schema, name}.Sanitize()
}
