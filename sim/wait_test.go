package sim

import (
	"testing"
	"time"
)

// An acquisition must never end before its record's real time; Close
// must still end the wait.
func TestSleepUntil(t *testing.T) {
	quit := make(chan struct{})
	for _, d := range []time.Duration{200 * time.Microsecond, 2 * time.Millisecond, 6 * time.Millisecond} {
		end := time.Now().Add(d)
		if !sleepUntil(end, quit) {
			t.Fatalf("sleepUntil +%v: false with quit open", d)
		}
		if early := time.Until(end); early > 0 {
			t.Errorf("sleepUntil +%v returned %v early", d, early)
		}
	}
	time.AfterFunc(5*time.Millisecond, func() { close(quit) })
	t0 := time.Now()
	if sleepUntil(time.Now().Add(time.Minute), quit) {
		t.Errorf("sleepUntil: true after quit closed")
	}
	if el := time.Since(t0); el > 30*time.Second {
		t.Errorf("sleepUntil took %v to see quit closed", el)
	}
}
