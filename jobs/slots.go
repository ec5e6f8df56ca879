package jobs

import "context"

// Slots bounds the refits that compute at once. A refit holds a slot
// while it fits, compares and checks predictions — the work of the cores —
// and not while it reads rows or writes the history, so that a daemon
// running more refits than it has cores keeps every core busy while some
// of them wait on the database. The zero value (nil) bounds nothing.
type Slots chan struct{}

// NewSlots makes n slots (n < 1 is taken as 1).
func NewSlots(n int) Slots { return make(Slots, max(n, 1)) }

// acquire waits for a slot, or for ctx to end.
func (s Slots) acquire(ctx context.Context) error {
	if s == nil {
		return nil
	}
	select {
	case s <- struct{}{}:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// release gives a slot back.
func (s Slots) release() {
	if s != nil {
		<-s
	}
}
