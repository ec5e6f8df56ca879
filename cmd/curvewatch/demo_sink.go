package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"sync"
	"time"

	"github.com/curvewatch/curvewatch/alerts/webhook"
)

// demoOut prints the demo's lines, one at a time, each after the wall-clock
// time: the feed, the progress, and the sink write from goroutines of
// their own.
type demoOut struct {
	mu  sync.Mutex
	w   io.Writer
	now func() time.Time
}

// line prints one timestamped line.
func (o *demoOut) line(format string, args ...any) {
	o.mu.Lock()
	defer o.mu.Unlock()
	fmt.Fprintf(o.w, "%s  %s\n", o.now().Format("15:04:05"), fmt.Sprintf(format, args...))
}

// text prints text as it is.
func (o *demoOut) text(format string, args ...any) {
	o.mu.Lock()
	defer o.mu.Unlock()
	fmt.Fprintf(o.w, format, args...)
}

// sinkMaxSkew is how far a delivery's timestamp may be from the sink's
// clock: both run in this process, so a few seconds is plenty.
const sinkMaxSkew = 30 * time.Second

// sinkMaxBody bounds what the sink reads of a request.
const sinkMaxBody = 1 << 20

// hookSink is the demo's webhook receiver: it checks each delivery's
// signature with webhook.Verify, prints the alert as one line and counts
// it. A delivery that arrives twice (a retry) is acknowledged and not
// counted again.
type hookSink struct {
	secret string
	out    *demoOut
	log    *slog.Logger
	now    func() time.Time

	mu       sync.Mutex
	seen     map[string]bool
	firing   int
	resolved int
	rejected int

	srv *http.Server
	ln  net.Listener
}

// startSink listens on a free loopback port and serves the sink. Stop it
// with stop.
func startSink(secret string, out *demoOut, log *slog.Logger) (*hookSink, error) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return nil, fmt.Errorf("start the webhook sink: %w", err)
	}
	s := &hookSink{secret: secret, out: out, log: log, now: time.Now, seen: map[string]bool{}, ln: ln}
	mux := http.NewServeMux()
	mux.HandleFunc("POST /hook", s.receive)
	s.srv = &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second,
		ErrorLog: slog.NewLogLogger(log.Handler(), slog.LevelWarn)}
	go func() {
		if err := s.srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("webhook sink stopped", "error", err)
		}
	}()
	return s, nil
}

// url is where the daemon posts alerts.
func (s *hookSink) url() string { return "http://" + s.ln.Addr().String() + "/hook" }

func (s *hookSink) stop(ctx context.Context) error {
	if err := s.srv.Shutdown(ctx); err != nil {
		s.srv.Close()
		return fmt.Errorf("stop the webhook sink: %w", err)
	}
	return nil
}

func (s *hookSink) receive(w http.ResponseWriter, r *http.Request) {
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, sinkMaxBody))
	if err != nil {
		http.Error(w, "cannot read the body", http.StatusBadRequest)
		return
	}
	if err := webhook.Verify(s.secret, r.Header, body, s.now(), sinkMaxSkew); err != nil {
		s.mu.Lock()
		s.rejected++
		s.mu.Unlock()
		s.log.Warn("webhook sink: rejected a delivery", "error", err)
		http.Error(w, "signature not accepted", http.StatusUnauthorized)
		return
	}
	var b webhook.Body
	if err := json.Unmarshal(body, &b); err != nil || b.Format != webhook.Format {
		http.Error(w, "not a "+webhook.Format+" body", http.StatusBadRequest)
		return
	}
	s.mu.Lock()
	dup := s.seen[b.Delivery]
	s.seen[b.Delivery] = true
	if !dup {
		switch b.Alert.State {
		case "firing":
			s.firing++
		case "resolved":
			s.resolved++
		}
	}
	s.mu.Unlock()
	if !dup {
		s.out.line("%s", alertLine(b.Alert))
	}
	w.WriteHeader(http.StatusNoContent)
}

// alertLine is how the sink shows an alert: its state, model, term (the
// kind for a model-wide alert) and summary.
func alertLine(a webhook.Alert) string {
	state := "FIRING"
	if a.State == "resolved" {
		state = "RESOLVED"
	}
	term := a.Term
	if term == "" {
		term = "(" + a.Kind + ")"
	}
	return fmt.Sprintf("%-9s %s  %s  %s", state, a.Model, term, a.Summary)
}

// counts returns the distinct deliveries received so far, and those whose
// signature was refused.
func (s *hookSink) counts() (firing, resolved, rejected int) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.firing, s.resolved, s.rejected
}
