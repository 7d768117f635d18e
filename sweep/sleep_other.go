//go:build !linux

package sweep

import "time"

// fineSleep waits until t with a runtime timer: elsewhere than Linux the
// runtime's timer waits (kqueue, Windows' high-resolution timers) are not
// rounded to whole milliseconds.
func fineSleep(t time.Time) { time.Sleep(time.Until(t)) }
