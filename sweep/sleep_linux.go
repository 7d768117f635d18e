//go:build linux

package sweep

import (
	"syscall"
	"time"
)

// fineSleep blocks the calling thread until t with nanosleep(2),
// restarting after a signal (the runtime's preemption signals
// interrupt it).
func fineSleep(t time.Time) {
	for {
		d := time.Until(t)
		if d <= 0 {
			return
		}
		ts := syscall.NsecToTimespec(int64(d))
		syscall.Nanosleep(&ts, nil) // EINTR: the loop recomputes what is left
	}
}
