package sweep

import (
	"context"
	"time"
)

// timerLate is how late a runtime timer may fire: on Linux the Go
// runtime waits for timers in epoll_wait, whose timeout is whole
// milliseconds, so the last fraction of a millisecond is rounded up to
// a full one (measured on the shared machine: a 9.5 ms timer fired
// after 10.3 ms on average). Every settling wait would otherwise be
// that much longer than asked.
const timerLate = 1500 * time.Microsecond

// realSleep is Config.Sleep's default: it waits d, or until ctx ends
// (ctx.Err()). A runtime timer covers all but the last timerLate, and a
// thread sleep (fineSleep) the rest, which the kernel times to within
// tens of microseconds; that last part, at most timerLate, is not cut
// short by ctx.
func realSleep(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return ctx.Err()
	}
	end := time.Now().Add(d)
	if c := d - timerLate; c > 0 {
		t := time.NewTimer(c)
		select {
		case <-t.C:
		case <-ctx.Done():
			t.Stop()
			return ctx.Err()
		}
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	fineSleep(end)
	return nil
}
