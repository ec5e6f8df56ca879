package alerts

import (
	"context"
	"net/http"
	"time"
)

// Delivery is one alert state change for one receiver, as queued in the
// outbox (the alert_deliveries table): the outbox lives in PostgreSQL, so
// a restart loses none.
type Delivery struct {
	ID int64
	// Receiver names the receiver, as Notifier.Name returns it
	// ("alertmanager:http://…", "webhook:https://…").
	Receiver string
	Alert    Alert
	// Attempts counts earlier attempts.
	Attempts int
	Created  time.Time
}

// Notifier sends deliveries to one receiver.
type Notifier interface {
	// Name identifies the receiver; it is stored with each delivery and
	// never holds a secret.
	Name() string
	// Notify sends one delivery. retry says whether a failure may succeed
	// later (a network error, a 5xx or 429) or never will (a 4xx): the
	// Dispatcher retries the first kind and gives up on the second. Errors
	// never hold a secret.
	Notify(ctx context.Context, d Delivery) (retry bool, err error)
}

// Outbox is the queue of pending deliveries (jobs/history implements it in
// PostgreSQL). The Dispatcher calls it from several goroutines at once.
type Outbox interface {
	// Claim takes up to limit deliveries that are due, hiding them from
	// other claimers for lease (several replicas may dispatch at once).
	// Deliveries should come oldest first: the Dispatcher sends the changes
	// of one alert to one receiver in the order they are claimed.
	Claim(ctx context.Context, limit int, lease time.Duration) ([]Delivery, error)
	// Delivered marks a delivery done.
	Delivered(ctx context.Context, id int64) error
	// Retry records a failed attempt and makes the delivery due again at
	// next.
	Retry(ctx context.Context, id int64, next time.Time, reason string) error
	// Abandon records a failed attempt after which the delivery is not
	// tried again.
	Abandon(ctx context.Context, id int64, reason string) error
}

// StatusRetryable reports whether an HTTP request that got a status outside
// 2xx may succeed if sent again: a server error (5xx), 429 Too Many
// Requests or 408 Request Timeout. Any other status (a 4xx: the request
// itself is wrong, or not allowed) never will. Receivers over HTTP use it to
// classify their failures.
func StatusRetryable(code int) bool {
	return code >= 500 || code == http.StatusTooManyRequests || code == http.StatusRequestTimeout
}
