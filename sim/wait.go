package sim

import "time"

// timerLate is how late a runtime timer may fire: on Linux the Go
// runtime waits for timers in epoll_wait, whose timeout is whole
// milliseconds, so the last fraction of a millisecond is rounded up to
// a full one (measured on the shared machine: 0.6–0.8 ms late on
// average). The simulator's acquisition ends would otherwise come that
// much after the record's real time.
const timerLate = 1500 * time.Microsecond

// sleepUntil waits until t, or until quit is closed (false): a runtime
// timer for all but the last timerLate, then a thread sleep (fineSleep)
// for the rest, which the kernel times to within tens of microseconds.
// The last part is not cut short by quit; it is at most timerLate.
func sleepUntil(t time.Time, quit <-chan struct{}) bool {
	if d := time.Until(t) - timerLate; d > 0 {
		tm := time.NewTimer(d)
		select {
		case <-tm.C:
		case <-quit:
			tm.Stop()
			return false
		}
	}
	select {
	case <-quit:
		return false
	default:
	}
	fineSleep(t)
	return true
}
