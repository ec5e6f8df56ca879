package webhook_test

import (
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/alerts/webhook"
)

// A receiver checks each request with Verify before it trusts the body,
// and acts once per Idempotency-Key.
func ExampleVerify() {
	const secret = "whsec-example"
	seen := map[string]bool{}
	handler := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		body, err := io.ReadAll(io.LimitReader(r.Body, 1<<20))
		if err != nil {
			http.Error(w, "read error", http.StatusBadRequest)
			return
		}
		if err := webhook.Verify(secret, r.Header, body, time.Now(), 5*time.Minute); err != nil {
			http.Error(w, "unauthorised", http.StatusUnauthorized)
			return
		}
		key := r.Header.Get(webhook.HeaderIdempotencyKey)
		if !seen[key] {
			seen[key] = true
			fmt.Println("new change:", key)
		}
		w.WriteHeader(http.StatusNoContent) // also for a duplicate
	})

	// A signed request, as the Notifier sends it.
	body := `{"format":"curvewatch-alert/1","delivery":"m/level_shift/firing/1"}`
	now := time.Now()
	for _, key := range []string{secret, secret, "wrong-secret"} {
		req := httptest.NewRequest(http.MethodPost, "/hook", strings.NewReader(body))
		req.Header.Set(webhook.HeaderIdempotencyKey, "m/level_shift/firing/1")
		req.Header.Set(webhook.HeaderTimestamp, fmt.Sprint(now.Unix()))
		req.Header.Set(webhook.HeaderSignature, webhook.Sign(key, now, []byte(body)))
		rec := httptest.NewRecorder()
		handler.ServeHTTP(rec, req)
		fmt.Println(rec.Code)
	}
	// Output:
	// new change: m/level_shift/firing/1
	// 204
	// 204
	// 401
}
