package sweep

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"strings"
	"time"

	"loopsweep/analysis"
	"loopsweep/instr"
)

// Tuning of the judge and the range control. These are engineering
// choices (common practice), not outside facts.
const (
	// rangeHeadroom: the input window (±range) is this many times the
	// tone's peak, so the next point may grow by that factor without
	// clipping.
	rangeHeadroom = 3.0
	// overRange: a window more than this many times the wanted one
	// wastes resolution on an 8-bit digitizer: re-capture at once.
	overRange = 8.0
	// rangeHysteresis: a window between the wanted one and this many
	// times it is kept, to avoid reconfiguring at every point.
	rangeHysteresis = 3.0
	// swingHeadroom: the window is at least this many times the raw
	// record's largest excursion from the window's centre.
	swingHeadroom = 1.5
	// maxCaptureTries bounds re-captures (DC level, clipping, range)
	// within one attempt.
	maxCaptureTries = 8
	// neighbourSigmas and the allowances: a point disagrees with its
	// neighbours when it is further from their log-frequency chord than
	// this many combined standard uncertainties plus the allowance plus
	// half the chord's own change (the response's curvature).
	neighbourSigmas      = 5.0
	neighbourAllowDB     = 3.0
	neighbourAllowDeg    = 20.0
	refineNearRel        = 0.003 // a tone within 0.3% of a crossing counts as "at" it (tones move up to 0.2%)
	refineTriesPerTarget = 3
	// maxRecordS caps a record's duration for retries and refinement
	// (the plan's own cycles are always taken).
	maxRecordS = 0.25
	// refineFreqRel: refinement also aims at a crossing frequency known
	// to 0.1% (one standard uncertainty).
	refineFreqRel = 0.001
	// refineNearMax bounds how far from a crossing (ln f) a point still
	// counts as at it when the crossing's frequency is poorly known.
	refineNearMax = 0.05
	// refineMinGain: a re-measure must be able to cut a point's variance
	// by at least this factor (more cycles, a larger injection) to be
	// worth its time.
	refineMinGain = 1.5
	// snrMarginDB: a first attempt is sized so its predicted SNR is at
	// least MinSNRdB plus this margin (the prediction's own scatter).
	snrMarginDB = 3.0
)

// snrPerCycleLocked is the linear SNR one cycle of record carries on the
// weaker channel, from the most recently finished attempt of the sweep
// that is neither clipped nor at the SNR cap, scaled to amplitude amp
// (tone power ∝ amp², the noise unchanged); 0 when none is known. SNR
// grows as the record's samples in white noise (analysis: SNR =
// N·A²/(2σ²) for the rectangular fit), so per cycle at the same samples
// per cycle.
func (e *Engine) snrPerCycleLocked(amp float64) float64 {
	var (
		best Attempt
		ok   bool
	)
	for _, p := range e.sess.Points {
		for _, a := range p.Attempts {
			if a.Ch1.Clipped || a.Ch2.Clipped || !(a.Cycles > 0) || !(a.AmpVpp > 0) {
				continue
			}
			if !ok || a.Finished.After(best.Finished) {
				best, ok = a, true
			}
		}
	}
	if !ok {
		return 0
	}
	snr := math.Min(best.Ch1.SNRdB, best.Ch2.SNRdB)
	if !(snr < analysis.SNRCapDB) || !(snr > -analysis.SNRCapDB) {
		return 0
	}
	return math.Pow(10, snr/10) / best.Cycles * sq(amp/best.AmpVpp)
}

// cyclesForSNR is the fewest cycles at perCycle (linear SNR per cycle)
// that reach MinSNRdB + snrMarginDB: SNR(c) = c·perCycle, so
// c = ⌈10^((MinSNRdB+margin)/10)/perCycle⌉, the closed form
// ⌈cycles·10^((MinSNRdB+margin−SNR(cycles))/10)⌉. 0 when perCycle is
// unknown.
func cyclesForSNR(set Settings, perCycle float64) int {
	if !(perCycle > 0) || !finite(perCycle) {
		return 0
	}
	c := math.Ceil(math.Pow(10, (set.MinSNRdB+snrMarginDB)/10) / perCycle)
	if !(c < maxCycles) {
		return maxCycles
	}
	return int(c)
}

func (e *Engine) interrupted() bool {
	e.mu.Lock()
	defer e.mu.Unlock()
	return e.paused || e.stopped
}

// nextJob picks the next work: user commands first, then unmeasured plan
// points in order, then neighbour checks, then refinement.
func (e *Engine) nextJob() (job, State, bool) {
	e.mu.Lock()
	defer e.mu.Unlock()
	if len(e.queue) > 0 {
		j := e.queue[0]
		e.queue = e.queue[1:]
		st := Running
		if j.reason == "refine" {
			st = Refining
		}
		return j, st, true
	}
	for _, p := range e.sess.Points {
		if len(p.Attempts) == 0 {
			return job{freq: p.FreqHz, reason: "plan"}, Running, true
		}
	}
	for i, p := range e.sess.Points {
		if e.checked[p.FreqHz] {
			continue
		}
		e.checked[p.FreqHz] = true
		if !p.Flagged && e.outlierLocked(i) {
			return job{freq: p.FreqHz, reason: "neighbours", cyclesX: 2, attempts: 1}, Running, true
		}
	}
	if e.set.Measure == MeasureLoop && e.refineUsed < e.set.RefineBudget {
		if j, ok := e.refineJobLocked(); ok {
			e.refineUsed++
			return j, Refining, true
		}
	}
	return job{}, Done, false
}

// outlierLocked says whether point i's chosen attempt is further from
// the chord of its two neighbours than their uncertainties and the
// response's curvature explain.
func (e *Engine) outlierLocked(i int) bool {
	pts := e.sess.Points
	if i <= 0 || i >= len(pts)-1 {
		return false
	}
	a, ok0 := e.sess.Chosen(i - 1)
	b, ok1 := e.sess.Chosen(i)
	c, ok2 := e.sess.Chosen(i + 1)
	if !ok0 || !ok1 || !ok2 {
		return false
	}
	t := math.Log(pts[i].FreqHz/pts[i-1].FreqHz) / math.Log(pts[i+1].FreqHz/pts[i-1].FreqHz)
	predG := a.GainDB + t*(c.GainDB-a.GainDB)
	sg := math.Sqrt(b.GainSigmaDB*b.GainSigmaDB + (a.GainSigmaDB*a.GainSigmaDB+c.GainSigmaDB*c.GainSigmaDB)/4)
	if math.Abs(b.GainDB-predG) > neighbourSigmas*sg+neighbourAllowDB+math.Abs(c.GainDB-a.GainDB)/2 {
		return true
	}
	pa, pb, pc := a.PhaseDeg, wrapNear(b.PhaseDeg, a.PhaseDeg), 0.0
	pc = wrapNear(c.PhaseDeg, pb)
	predP := pa + t*(pc-pa)
	sp := math.Sqrt(b.PhaseSigmaDeg*b.PhaseSigmaDeg + (a.PhaseSigmaDeg*a.PhaseSigmaDeg+c.PhaseSigmaDeg*c.PhaseSigmaDeg)/4)
	return math.Abs(pb-predP) > neighbourSigmas*sp+neighbourAllowDeg+math.Abs(pc-pa)/2
}

func sq(x float64) float64 { return x * x }

// wrapNear returns deg plus the multiple of 360° that brings it nearest
// ref.
func wrapNear(deg, ref float64) float64 {
	return deg - 360*math.Round((deg-ref)/360)
}

// refineJobLocked proposes a point at (or a re-measure of a point
// near) a crossing whose margin or frequency is not yet known well
// enough: σ(PM) above RefinePMDeg, σ(GM) above RefineGMDB, or σ(f)/f
// above refineFreqRel, where σ(f)/f is the larger of the analysis's
// first-order figure and crossingFreqSigmaRel's (the bracketing points'
// σ over a slope fitted across ±slopeSpanDec).
func (e *Engine) refineJobLocked() (job, bool) {
	m, err := e.sess.Margins()
	if err != nil {
		return job{}, false
	}
	curve := e.sess.Curve()
	type target struct {
		f       float64
		need    bool
		grow    float64 // variance ratio still to gain: (σ/target)²
		near    float64 // a point this close (ln f) counts as at the crossing
		bracket []float64
		phase   bool // the crossing is of the phase (else of the gain)
	}
	var ts []target
	add := func(f, r float64, phase bool) {
		rel, lo := crossingFreqSigmaRel(curve, f, phase)
		r = math.Max(r, sq(rel/refineFreqRel))
		t := target{f: f, need: r > 1, grow: r, phase: phase,
			near: math.Max(refineNearRel, math.Min(rel, refineNearMax))}
		if lo >= 0 {
			t.bracket = []float64{curve[lo].FreqHz, curve[lo+1].FreqHz}
		}
		ts = append(ts, t)
	}
	for _, g := range m.GainCrossovers {
		add(g.FreqHz, math.Max(sq(g.SigmaDeg/e.set.RefinePMDeg), sq(g.SigmaFreqHz/(refineFreqRel*g.FreqHz))), false)
	}
	for _, p := range m.PhaseCrossovers {
		add(p.FreqHz, math.Max(sq(p.SigmaDB/e.set.RefineGMDB), sq(p.SigmaFreqHz/(refineFreqRel*p.FreqHz))), true)
	}
	// tone is the frequency point i injected.
	tone := func(i int) float64 {
		f := e.sess.Points[i].FreqHz
		if a, ok := e.sess.Chosen(i); ok {
			f = a.Tone(f)
		}
		return f
	}
	// First put a point at every crossing that has none near it (the
	// interpolation error is not in the uncertainty), then re-measure.
	// "Near" is at least refineNearRel and at least the crossing's own
	// frequency uncertainty: a point closer to an existing one than the
	// scatter can place the crossing adds noise-made crossings, not
	// knowledge; the bracketing points are measured longer instead.
	for pass := 0; pass < 2; pass++ {
		for _, t := range ts {
			if !(t.f > 0) || !finite(t.f) {
				continue
			}
			near, dist := -1, math.Inf(1)
			for i := range e.sess.Points {
				if d := math.Abs(math.Log(tone(i) / t.f)); d < dist {
					near, dist = i, d
				}
			}
			if near < 0 {
				continue
			}
			if pass == 0 && dist > t.near {
				key := math.Round(math.Log(t.f)/refineNearRel) * refineNearRel
				if e.refineTry[key] >= refineTriesPerTarget {
					continue
				}
				e.refineTry[key]++
				// Measure the new point as well as the crossing needs.
				j := job{freq: t.f, insert: true, reason: "refine", cyclesX: 2, attempts: 1}
				if a, ok := e.sess.Chosen(near); ok && t.need {
					e.refineEffortLocked(&j, a, math.Min(math.Max(2*t.grow, 2), 1000))
				}
				return j, true
			}
			if pass == 1 && dist <= t.near && t.need {
				// Re-measure the noisier of the two points that bracket the
				// crossing (its σ is theirs), else the noisiest of the point
				// at the crossing and its two neighbours, with the cycles the
				// crossing's uncertainty asks for. A point whose chosen
				// attempt already has (nearly) the longest record and the
				// largest injection allowed is left: a repeat would not
				// lower its σ.
				pick := func(cands []int, score func(Attempt) float64) int {
					best, bestScore := -1, 0.0
					for _, i := range cands {
						a, ok := e.sess.Chosen(i)
						if !ok || e.refineTry[-e.sess.Points[i].FreqHz] >= refineTriesPerTarget ||
							sq(math.Max(e.refineAmpTopLocked(a), a.AmpVpp))*float64(e.recordCycleCap(e.set, tone(i))) < refineMinGain*sq(a.AmpVpp)*a.Cycles {
							continue
						}
						if sc := score(a); best < 0 || sc > bestScore {
							best, bestScore = i, sc
						}
					}
					return best
				}
				var br []int
				for i := range e.sess.Points {
					for _, f := range t.bracket {
						if tone(i) == f {
							br = append(br, i)
						}
					}
				}
				best := pick(br, func(a Attempt) float64 {
					if t.phase {
						return a.PhaseSigmaDeg
					}
					return a.GainSigmaDB
				})
				if best < 0 {
					best = pick([]int{near - 1, near, near + 1}, attemptScore)
				}
				if best < 0 {
					continue
				}
				p := e.sess.Points[best]
				a, _ := e.sess.Chosen(best)
				e.refineTry[-p.FreqHz]++
				// The crossing's uncertainty comes from the points around it:
				// give this one the variance ratio the crossing still lacks.
				j := job{freq: p.FreqHz, reason: "refine", cyclesX: 2, attempts: 1}
				e.refineEffortLocked(&j, a, math.Min(math.Max(2*t.grow, 2), 1000))
				return j, true
			}
		}
	}
	return job{}, false
}

// refineEffortLocked sets the cycles, and when they do not suffice the
// amplitude, of refinement job j so its point's variance falls by grow
// from attempt a's. The phase and gain variances of a record fall as
// 1/(A²·N) (A the injection, N the samples: Kay's bound, see analysis),
// so the effort a.AmpVpp²·a.Cycles·grow is bought first with cycles, at
// the sweep's own amplitude; when the longest record (recordCycleCap:
// maxRecordS, the digitizer's points) cannot hold them, the injection is
// raised for this one attempt by the square root of the shortfall, up to
// refineAmpTopLocked, and the job carries it as an override of the
// amplitude alone. The Guard still enforces the cap and ramps the step
// up.
func (e *Engine) refineEffortLocked(j *job, a Attempt, grow float64) {
	set := e.set
	amp := set.AmplitudeAt(j.freq)
	if set.AutoAmp && e.autoAmp > 0 {
		amp = clampAmp(e.autoAmp, set.MaxAmpVpp)
	}
	effort := sq(a.AmpVpp) * math.Max(a.Cycles, 1) * grow
	if !(effort > 0) || !finite(effort) {
		return
	}
	capC := float64(e.recordCycleCap(set, j.freq))
	cyc := effort / sq(amp)
	if top := e.refineAmpTopLocked(a); cyc > capC && top > amp {
		raised := math.Min(math.Sqrt(effort/capC), top)
		cyc = effort / sq(raised)
		ov := copySettings(set)
		ov.AmpVpp, ov.AmpProfile, ov.AutoAmp = raised, nil, false
		j.override = &ov
	}
	j.cyclesX = max(j.cyclesX, int(math.Ceil(math.Min(cyc, capC)/float64(set.Cycles))))
}

// refineAmpCapLocked is the largest injection refinement may use:
// MaxAmpVpp, and below half of the smallest amplitude at which an attempt
// of this sweep showed harmonics above MaxHarmonicDB (or the level
// control's learned ceiling), so a raised level stays in the linear
// range the sweep has seen.
func (e *Engine) refineAmpCapLocked() float64 {
	top := e.set.MaxAmpVpp
	if e.ampCeiling > 0 {
		top = math.Min(top, e.ampCeiling)
	}
	for _, p := range e.sess.Points {
		for _, a := range p.Attempts {
			if strings.HasPrefix(a.Problem, "harmonics") {
				top = math.Min(top, a.AmpVpp/2)
			}
		}
	}
	return top
}

// refineAmpTopLocked is the largest injection a refinement re-measure of
// the point attempt a measured may use: refineAmpCapLocked, and no more
// than keeps both probed nodes' tones within MaxAmpVpp peak-to-peak
// (a's amplitude scaled by MaxAmpVpp over a's larger tone, 2·peak). The
// nodes swing by v_z/|1+L|: near a phase crossover, where |L| ≪ 1, about
// the injection itself, so the raise is nearly the full cap; near a gain
// crossover with a thin margin |1+L| is small and the nodes swing several
// times the injection, which then stays near the sweep's own level
// (common practice: keep the disturbance small where the loop amplifies
// it).
func (e *Engine) refineAmpTopLocked(a Attempt) float64 {
	top := e.refineAmpCapLocked()
	if pk := math.Max(a.Ch1.AmpPeakV, a.Ch2.AmpPeakV); pk > 0 && a.AmpVpp > 0 {
		top = math.Min(top, a.AmpVpp*e.set.MaxAmpVpp/(2*pk))
	}
	return top
}

// recordCycleCap is the most cycles one record at tone f can hold:
// cycleCap, and the digitizer's longest record at MinPerCycle samples
// per cycle.
func (e *Engine) recordCycleCap(set Settings, f float64) int {
	return max(1, min(cycleCap(set, f), e.cfg.MaxPoints/max(set.MinPerCycle, 1)))
}

// cycleCap is the most cycles a record at tone f may take: maxCycles,
// and maxRecordS of signal, but never fewer than the plan's Cycles.
func cycleCap(set Settings, f float64) int {
	return min(maxCycles, max(set.Cycles, int(maxRecordS*f)))
}

// runJob measures one point: up to the allowed attempts, each with more
// cycles than the last, until one passes the judge; a point that stays
// bad is flagged. It publishes the new margins and leaves the session to
// be saved by the next job, while that job's point settles (or by Run
// when no job follows: every way out of Run saves). Either way the
// point is on disk before the next capture begins, and before the next
// PointStarted is published.
func (e *Engine) runJob(ctx context.Context, j job) (err error) {
	defer func() {
		if serr := e.joinSave(); serr != nil && err == nil {
			err = fmt.Errorf("save session: %w", serr)
		}
	}()
	e.mu.Lock()
	set := e.set
	if j.override != nil {
		set = *j.override
	}
	idx := e.findLocked(j.freq)
	added := false
	if idx < 0 {
		if !j.insert {
			e.mu.Unlock()
			return nil
		}
		idx = e.insertLocked(Point{FreqHz: j.freq, Chosen: -1, Refined: true})
		e.checked[j.freq] = true
		added = true
	}
	if e.paused || e.stopped {
		e.mu.Unlock()
		return errInterrupted
	}
	stepCtx, cancel := context.WithCancel(ctx)
	e.cancelStep = cancel
	e.mu.Unlock()
	defer func() {
		cancel()
		e.mu.Lock()
		e.cancelStep = nil
		e.mu.Unlock()
	}()
	if added {
		e.emit(PointAdded{Index: idx, FreqHz: j.freq})
	}

	maxA := j.attempts
	if maxA <= 0 {
		maxA = set.MaxAttempts
	}
	cx := j.cyclesX
	if cx < 1 {
		cx = 1
	}
	amp := set.AmplitudeAt(j.freq)
	if set.AutoAmp && e.autoAmp > 0 {
		amp = clampAmp(e.autoAmp, set.MaxAmpVpp)
	}
	reason := j.reason
	problem := ""
	var prev *Attempt
	if j.reason == "neighbours" {
		e.mu.Lock()
		if a, ok := e.sess.Chosen(e.findLocked(j.freq)); ok {
			prev = &a
		}
		e.mu.Unlock()
	}
	cycles := set.Cycles * cx
	// Size a point's first attempt from the SNR per cycle the sweep last
	// measured, so it is unlikely to need a retry (never fewer cycles
	// than planned; the cap below still holds). A point that already has
	// attempts (a retry carried over a reconnect, a re-measure) keeps the
	// growth its job was given.
	e.mu.Lock()
	if len(e.sess.Points[idx].Attempts) == 0 {
		cycles = max(cycles, cyclesForSNR(set, e.snrPerCycleLocked(amp)))
	}
	e.mu.Unlock()
	for k := 0; k < maxA; k++ {
		cycles = min(cycles, cycleCap(set, j.freq))
		e.mu.Lock()
		idx = e.findLocked(j.freq)
		n := len(e.sess.Points[idx].Attempts)
		e.mu.Unlock()
		// The previous job's point is saved while this one settles, and
		// this PointStarted waits for that save.
		var save func()
		if ev := (PointStarted{Index: idx, FreqHz: j.freq, Attempt: n + 1}); e.unsaved {
			save = func() { e.saveThenAnnounce(ev) }
		} else {
			e.emit(ev)
		}
		a, err := e.measureOnce(ctx, stepCtx, set, j.freq, amp, cycles, save)
		if err != nil {
			return err
		}
		a.Reason = reason
		var next float64
		problem, next = judge(set, a)
		if problem == "" && prev != nil && disagree(*prev, a) {
			problem = "attempts disagree beyond their uncertainty"
		}
		a.Problem = problem
		e.mu.Lock()
		idx = e.findLocked(j.freq)
		p := &e.sess.Points[idx]
		p.Attempts = append(p.Attempts, a)
		cp := *p
		cp.Attempts = append([]Attempt(nil), p.Attempts...)
		e.mu.Unlock()
		e.emit(PointMeasured{Index: idx, Point: cp})
		if set.AutoAmp {
			if next < a.AmpVpp && strings.HasPrefix(problem, "harmonics") {
				// The response is not linear above this level: keep the
				// level control below it for the rest of the sweep.
				e.ampCeiling = next
			}
			if e.ampCeiling > 0 && next > e.ampCeiling {
				next = e.ampCeiling
			}
			amp = next
			e.autoAmp = next
		}
		if problem == "" {
			break
		}
		reason = "retry: " + problem
		// More cycles for the retry: as many as the SNR shortfall asks
		// (noise power in the tone's bin falls as 1/cycles), at least
		// twice, at most 16 times.
		grow := 2.0
		if snr := math.Min(a.Ch1.SNRdB, a.Ch2.SNRdB); snr < set.MinSNRdB {
			grow = math.Min(16, math.Max(2, math.Pow(10, (set.MinSNRdB+3-snr)/10)))
		}
		cycles = int(math.Ceil(float64(cycles) * grow))
		if e.interrupted() && k+1 < maxA {
			// Keep what was measured; the job runs again on Resume.
			if err := e.Save(); err != nil {
				return fmt.Errorf("save session: %w", err)
			}
			return errInterrupted
		}
	}
	e.mu.Lock()
	idx = e.findLocked(j.freq)
	p := &e.sess.Points[idx]
	flagged := false
	if problem != "" {
		p.Flagged, p.Flag = true, problem
		flagged = true
	} else if p.Flagged && j.reason != "refine" {
		p.Flagged, p.Flag = false, ""
	}
	e.mu.Unlock()
	if flagged {
		e.emit(PointFlagged{Index: idx, Reason: problem})
	}
	if err := e.drainErrors(ctx, fmt.Sprintf("the point at %g Hz", j.freq)); err != nil {
		return err
	}
	e.unsaved = true
	if set.Measure == MeasureLoop {
		e.mu.Lock()
		m, err := e.sess.Margins()
		e.mu.Unlock()
		if err == nil {
			e.emit(MarginsUpdated{Margins: m})
		}
	}
	return nil
}

// saveThenAnnounce saves the session in the background, while the point
// that ev starts settles, and publishes ev once the save has succeeded,
// so a PointStarted still means every earlier point is on disk.
// joinSave waits for it: every capture does so first.
func (e *Engine) saveThenAnnounce(ev PointStarted) {
	e.unsaved = false
	done := make(chan error, 1)
	e.saveDone = done
	go func() {
		err := e.Save()
		if err == nil {
			e.emit(ev)
		}
		done <- err
	}()
}

// joinSave waits for the background save, if one is running, and
// returns its error.
func (e *Engine) joinSave() error {
	if e.saveDone == nil {
		return nil
	}
	err := <-e.saveDone
	e.saveDone = nil
	return err
}

// disagree says whether two attempts at one frequency differ by more than
// neighbourSigmas combined standard uncertainties (plus 0.1 dB / 1° for
// the drift of a live bench).
func disagree(a, b Attempt) bool {
	sg := math.Hypot(a.GainSigmaDB, b.GainSigmaDB)
	sp := math.Hypot(a.PhaseSigmaDeg, b.PhaseSigmaDeg)
	return math.Abs(a.GainDB-b.GainDB) > neighbourSigmas*sg+0.1 ||
		math.Abs(wrapNear(a.PhaseDeg-b.PhaseDeg, 0)) > neighbourSigmas*sp+1
}

// judge returns what is wrong with an attempt ("" when nothing) and, for
// the automatic level control, the amplitude to use next: raised so the
// smaller tone's SNR reaches TargetSNRdB, halved when a harmonic is above
// MaxHarmonicDB, never above MaxAmpVpp.
func judge(set Settings, a Attempt) (string, float64) {
	next := a.AmpVpp
	snr := math.Min(a.Ch1.SNRdB, a.Ch2.SNRdB)
	harm := -math.Inf(1)
	for _, c := range []ChannelReading{a.Ch1, a.Ch2} {
		// A harmonic counts only when it stands 12 dB above the noise in
		// its own bin, which sits about SNR dB below the tone (noise alone
		// reaches that with probability e^(−10^1.2) ≈ 1e-7).
		for _, h := range []float64{c.H2dBc, c.H3dBc} {
			if h > -c.SNRdB+12 {
				harm = math.Max(harm, h)
			}
		}
	}
	problem := ""
	switch {
	case a.Ch1.Clipped || a.Ch2.Clipped:
		problem = "clipped at the largest range"
	case !(snr >= set.MinSNRdB):
		problem = fmt.Sprintf("SNR %.1f dB below %.1f dB", snr, set.MinSNRdB)
	case set.AutoAmp && harm > set.MaxHarmonicDB:
		problem = fmt.Sprintf("harmonics %.1f dBc above %.1f dBc", harm, set.MaxHarmonicDB)
	}
	if set.AutoAmp {
		switch {
		case harm > set.MaxHarmonicDB:
			next = a.AmpVpp / 2
		case snr < set.TargetSNRdB && finite(snr):
			next = a.AmpVpp * math.Pow(10, (set.TargetSNRdB-snr)/20)
		case snr > set.TargetSNRdB+12 && finite(snr):
			next = a.AmpVpp * math.Pow(10, (set.TargetSNRdB+6-snr)/20)
		}
		next = clampAmp(next, set.MaxAmpVpp)
	}
	return problem, next
}

// measureOnce makes one attempt near f Hz: plans the record, sets the
// generator to the tone the record holds a whole number of cycles of
// (amplitude before output on, large steps ramped), configures the
// digitizer while the loop settles, waits out the rest of the settling
// time, captures with auto ranging, and extracts the response. save,
// when not nil, starts the background save of the session: it is called
// once, when the settling wait begins (so it does not slow the exchanges
// before it), or before the first capture when there is no wait.
func (e *Engine) measureOnce(ctx, stepCtx context.Context, set Settings, f, amp float64, cycles int, save func()) (Attempt, error) {
	startSave := func() {
		if save != nil {
			save()
			save = nil
		}
	}
	started := e.cfg.Now()
	amp = clampAmp(amp, set.MaxAmpVpp)
	var (
		t1, t2 analysis.Tone
		got    instr.CaptureSettings
		tone   float64
	)
	for try := 0; ; try++ {
		if e.interrupted() {
			return Attempt{}, errInterrupted
		}
		want, err := e.captureWant(set, f, cycles)
		if err != nil {
			return Attempt{}, err
		}
		var rippleBin int
		want, tone, rippleBin, err = e.planRecord(ctx, want, f, cycles, set.SwitchingHz)
		if err != nil {
			return Attempt{}, err
		}
		for {
			t0 := e.cfg.Now()
			changed, err := e.apply(ctx, stepCtx, tone, amp)
			if err != nil {
				return Attempt{}, err
			}
			got, err = e.configure(ctx, want, tone)
			if err != nil {
				return Attempt{}, err
			}
			// The digitizer may not have taken the plan (a cached
			// interval gone stale): hold whole cycles at what it chose.
			c := math.Max(1, math.Round(float64(got.Points)*tone*got.IntervalS))
			actual := c / (float64(got.Points) * got.IntervalS)
			if changed {
				settled := t0.Add(set.SettleTime(tone))
				if !e.ranged && math.Abs(actual-tone) <= 1e-9*tone {
					startSave()
					perCycle, err := e.rangeWhileSettling(ctx, stepCtx, want, got, tone, settled)
					if err != nil {
						return Attempt{}, err
					}
					// The attempt's own record, with the windows learned (a
					// no-op when no ranging record was taken), and long
					// enough for the SNR the ranging predicts.
					want.Channels = e.chans
					if got.Points == want.Points {
						want.Points, rippleBin = e.lengthenRecord(set, got.Points, int(c), rippleBin, tone, cyclesForSNR(set, perCycle))
					}
					if got, err = e.configure(ctx, want, tone); err != nil {
						return Attempt{}, err
					}
					c = math.Max(1, math.Round(float64(got.Points)*tone*got.IntervalS))
					actual = c / (float64(got.Points) * got.IntervalS)
					// A capture taken again (range) keeps the length.
					cycles = max(cycles, int(c))
				}
				startSave()
				if err := e.sleep(ctx, stepCtx, settled.Sub(e.cfg.Now())); err != nil {
					return Attempt{}, err
				}
			}
			if math.Abs(actual-tone) <= 1e-9*tone {
				break
			}
			tone = actual
		}
		if e.interrupted() {
			return Attempt{}, errInterrupted
		}
		startSave()
		if err := e.joinSave(); err != nil {
			return Attempt{}, fmt.Errorf("save session: %w", err)
		}
		if err := e.cfg.Dig.Capture(ctx, e.buf1[:got.Points], e.buf2[:got.Points]); err != nil {
			return Attempt{}, fmt.Errorf("capture %d points at %g Hz: %w", got.Points, tone, err)
		}
		o1, o2 := clipWindow(got.Channels[0]), clipWindow(got.Channels[1])
		// The raw swing about the window's centre (ripple, noise, tone and
		// all): the window must hold it whatever the fit later removes.
		ext := [2]extent{extentOf(e.buf1[:got.Points]), extentOf(e.buf2[:got.Points])}
		var clip1, clip2 bool
		if rippleBin > 0 && got.Points == want.Points {
			// Clipping is judged on the raw samples, before the ripple goes.
			clip1 = clipped(e.buf1[:got.Points], o1)
			clip2 = clipped(e.buf2[:got.Points], o2)
			removeBin(e.buf1[:got.Points], rippleBin)
			removeBin(e.buf2[:got.Points], rippleBin)
			o1.ClipLow, o1.ClipHigh, o2.ClipLow, o2.ClipHigh = 0, 0, 0, 0
		}
		t1, t2, err = analysis.EstimatePair(e.buf1[:got.Points], e.buf2[:got.Points], got.IntervalS, tone, o1, o2)
		if err != nil {
			return Attempt{}, fmt.Errorf("estimate the tone at %g Hz: %w", tone, err)
		}
		t1.Clipped = t1.Clipped || clip1
		t2.Clipped = t2.Clipped || clip2
		again := e.autorange(t1, t2, ext, got)
		if !again || try+1 >= maxCaptureTries {
			break
		}
	}
	var r analysis.Response
	if set.Measure == MeasureRatio {
		r = analysis.Ratio(t1, t2)
	} else {
		r = analysis.LoopGain(t1, t2)
	}
	h := r.H
	if c := e.cfg.Calibration; c != nil {
		if k := c.At(tone); k != 0 {
			h /= k
		}
	}
	a := Attempt{
		Started:       started,
		Finished:      e.cfg.Now(),
		FreqHz:        tone,
		AmpVpp:        amp,
		IntervalS:     got.IntervalS,
		RecordLength:  got.Points,
		Cycles:        t1.Cycles,
		Ch1:           reading(t1, got.Channels[0]),
		Ch2:           reading(t2, got.Channels[1]),
		Re:            real(h),
		Im:            imag(h),
		GainDB:        20 * math.Log10(cmplx.Abs(h)),
		PhaseDeg:      analysis.WrapDeg(cmplx.Phase(h) * 180 / math.Pi),
		GainSigmaDB:   r.GainSigmaDB,
		PhaseSigmaDeg: r.PhaseSigmaDeg,
	}
	sanitize(&a)
	return a, nil
}

// sanitize replaces values JSON cannot hold (NaN, ±Inf: a channel with
// no tone at all) so the session stays saveable; the attempt then fails
// the judge on its SNR.
func sanitize(a *Attempt) {
	for _, p := range []*float64{&a.Re, &a.Im, &a.GainDB, &a.PhaseDeg, &a.GainSigmaDB, &a.PhaseSigmaDeg, &a.Cycles} {
		if !finite(*p) {
			*p = 0
		}
	}
	if a.GainSigmaDB == 0 && (a.Re == 0 && a.Im == 0) {
		a.GainSigmaDB, a.PhaseSigmaDeg = 1e6, 180
	}
	for _, c := range []*ChannelReading{&a.Ch1, &a.Ch2} {
		for _, p := range []*float64{&c.AmpPeakV, &c.PhaseDeg, &c.DCV, &c.NoiseV, &c.H2dBc, &c.H3dBc} {
			if !finite(*p) {
				*p = 0
			}
		}
		switch {
		case math.IsNaN(c.SNRdB) || math.IsInf(c.SNRdB, -1):
			c.SNRdB = -200
		case math.IsInf(c.SNRdB, 1):
			c.SNRdB = 200
		}
	}
}

func reading(t analysis.Tone, ch instr.ChannelSettings) ChannelReading {
	return ChannelReading{
		AmpPeakV: t.AmpPeak,
		PhaseDeg: t.PhaseRad * 180 / math.Pi,
		DCV:      t.DC,
		NoiseV:   t.NoiseRMS,
		SNRdB:    t.SNRdB,
		H2dBc:    t.H2dBc,
		H3dBc:    t.H3dBc,
		Clipped:  t.Clipped,
		RangeV:   ch.RangeV,
		OffsetV:  ch.OffsetV,
	}
}

// apply sets the generator to f Hz at amp Vpp and reports whether
// anything changed (the caller then waits for the loop to settle). With
// the output off the amplitude is set before the output is enabled; with
// it on, a step up of more than twice is ramped in doublings, each held a
// couple of cycles.
func (e *Engine) apply(ctx, stepCtx context.Context, f, amp float64) (bool, error) {
	if !e.outputOn {
		if err := e.cfg.Gen.SetAmplitude(ctx, amp); err != nil {
			return false, fmt.Errorf("set amplitude %g Vpp: %w", amp, err)
		}
		e.ampNow = amp
		if err := e.cfg.Gen.SetFrequency(ctx, f); err != nil {
			return false, fmt.Errorf("set frequency %g Hz: %w", f, err)
		}
		e.freqNow = f
		if err := e.cfg.Gen.SetOutput(ctx, true); err != nil {
			return false, fmt.Errorf("turn the output on: %w", err)
		}
		e.outputOn = true
		return true, nil
	}
	changed := false
	// Within the record planning's own tolerance (measureOnce) the
	// frequency is already set: a retry's plan that rounds to a tone a
	// few ulps away needs neither the command nor a settling wait.
	if math.Abs(f-e.freqNow) > 1e-9*f {
		if err := e.cfg.Gen.SetFrequency(ctx, f); err != nil {
			return false, fmt.Errorf("set frequency %g Hz: %w", f, err)
		}
		e.freqNow = f
		changed = true
	}
	if amp != e.ampNow {
		for a := e.ampNow * 2; a < amp && e.ampNow > 0; a *= 2 {
			if err := e.cfg.Gen.SetAmplitude(ctx, a); err != nil {
				return false, fmt.Errorf("ramp amplitude to %g Vpp: %w", a, err)
			}
			e.ampNow = a
			if err := e.sleep(ctx, stepCtx, rampDwell(f)); err != nil {
				return false, err
			}
		}
		if err := e.cfg.Gen.SetAmplitude(ctx, amp); err != nil {
			return false, fmt.Errorf("set amplitude %g Vpp: %w", amp, err)
		}
		e.ampNow = amp
		changed = true
	}
	return changed, nil
}

// rampDwell is how long each step of an amplitude ramp is held: two
// cycles, at least 1 ms.
func rampDwell(f float64) time.Duration {
	d := time.Duration(2 / f * float64(time.Second))
	if d < time.Millisecond {
		d = time.Millisecond
	}
	return d
}

// sleep waits, cut short by Pause or Stop (errInterrupted) or ctx.
func (e *Engine) sleep(ctx, stepCtx context.Context, d time.Duration) error {
	if d <= 0 {
		return nil
	}
	err := e.cfg.Sleep(stepCtx, d)
	if err == nil {
		return nil
	}
	if ctx.Err() != nil {
		return ctx.Err()
	}
	if e.interrupted() {
		return errInterrupted
	}
	if errors.Is(err, context.Canceled) {
		return errInterrupted
	}
	return fmt.Errorf("settle: %w", err)
}

// captureWant plans a record: at least cycles whole cycles of f with at
// least MinPerCycle samples each, fewer samples per cycle (never below
// minPerCycleMin) if the digitizer's record limit demands it, and a
// sample rate that keeps the switching frequency's alias at least two
// bins from the tone.
func (e *Engine) captureWant(set Settings, f float64, cycles int) (instr.CaptureSettings, error) {
	maxP := e.cfg.MaxPoints
	spc := set.MinPerCycle
	if cycles*spc > maxP {
		// Fewer cycles: the samples per cycle stay, so the timebase's
		// rounding cannot leave too few.
		cycles = max(1, maxP/spc)
	}
	if cycles < 1 {
		return instr.CaptureSettings{}, fmt.Errorf("plan a record at %g Hz: the digitizer's %d points cannot hold one cycle", f, maxP)
	}
	if fsw := set.SwitchingHz; fsw > 0 {
		base := spc
		for d := 0; d < 64; d++ {
			s := base + d
			if s*cycles > maxP {
				break
			}
			if aliasClear(f, s, cycles, fsw) {
				spc = s
				break
			}
		}
	}
	return instr.CaptureSettings{
		Points:    cycles * spc,
		IntervalS: 1 / (f * float64(spc)),
		Channels:  e.chans,
	}, nil
}

// aliasClear says whether fsw, sampled at f·spc, folds to a frequency at
// least two DFT bins (bin = f/cycles) from f, 2f and 3f.
func aliasClear(f float64, spc, cycles int, fsw float64) bool {
	fs := f * float64(spc)
	a := math.Mod(fsw, fs)
	if a > fs/2 {
		a = fs - a
	}
	bin := f / float64(cycles)
	for h := 1.0; h <= 3; h++ {
		if math.Abs(a-h*f) < 2*bin {
			return false
		}
	}
	return true
}

// planRecord fixes the record length for want's sample interval as the
// digitizer will actually round it (learned from a Configure the first
// time an interval is asked for, then remembered) and returns the plan
// with the tone frequency: c/(n·dt) for c = cycles whole cycles in n
// samples, a shift from f of at most 1/(2·samples per cycle·cycles).
func (e *Engine) planRecord(ctx context.Context, want instr.CaptureSettings, f float64, cycles int, fsw float64) (instr.CaptureSettings, float64, int, error) {
	// With a switching frequency, other sample intervals are tried when
	// the ripple's alias cannot be put on a bin of its own at the first.
	base := want.IntervalS
	// An interval the digitizer already chose, giving between 0.8 and 2.5
	// times the wanted samples per cycle, is asked for as is: it needs no
	// Configure to learn how the digitizer rounds it.
	bestKnown := 0.0
	for _, dt := range e.dtCache {
		if r := base / dt; r >= 0.4 && r <= 1.25 && (bestKnown == 0 || math.Abs(math.Log(r)) < math.Abs(math.Log(base/bestKnown))) {
			bestKnown = dt
		}
	}
	if bestKnown > 0 {
		base = bestKnown
		e.dtCache[bestKnown] = bestKnown
	}
	var (
		fn, fc float64
		fb     = -1
		fdt    float64
		found  bool
	)
	for i, k := range []float64{1, 0.5, 0.2, 0.1, 0.05, 0.02, 2} {
		w := want
		w.IntervalS = base * k
		if i > 0 && 1/(f*w.IntervalS) < 1.5*minPerCycleMin {
			continue
		}
		dt, err := e.actualInterval(ctx, w, f)
		if err != nil {
			if i > 0 {
				continue // an interval the digitizer refuses: try the next
			}
			return want, 0, -1, err
		}
		if spc := 1 / (f * dt); spc < minPerCycleMin {
			if i == 0 {
				return want, 0, -1, fmt.Errorf("plan a record at %g Hz: the digitizer's interval %g s gives %.1f samples per cycle, fewer than %d", f, dt, spc, minPerCycleMin)
			}
			continue
		}
		n, c, bin, ok := recordFor(cycles, f, dt, fsw, e.cfg.MaxPoints)
		if i == 0 || ok {
			want.IntervalS, fn, fc, fb, fdt = w.IntervalS, float64(n), c, bin, dt
		}
		if ok {
			found = true
			break
		}
		if fsw == 0 {
			break
		}
	}
	_ = found
	want.Points = int(fn)
	return want, fc / (fn * fdt), fb, nil
}

// actualInterval is the sample interval the digitizer picks for want's:
// remembered, or learned from a Configure.
func (e *Engine) actualInterval(ctx context.Context, want instr.CaptureSettings, f float64) (float64, error) {
	if dt, ok := e.dtCache[want.IntervalS]; ok {
		return dt, nil
	}
	if want.Points > e.cfg.MaxPoints {
		want.Points = e.cfg.MaxPoints
	}
	got, err := e.configure(ctx, want, f)
	if err != nil {
		return 0, err
	}
	if got.Points < want.Points && got.Points < e.cfg.MaxPoints {
		e.cfg.MaxPoints = got.Points
	}
	return got.IntervalS, nil
}

// Record planning limits (engineering choices).
const (
	maxToneShift   = 0.002 // the tone may move by 0.2% to fit the record
	maxRippleDenom = 1000  // largest q tried for f_sw·dt = p/q
	maxCycleGrowth = 20    // cycles may grow to 20× to hold the ripple whole
)

// recordFor plans n samples at dt holding c whole cycles of the tone
// c/(n·dt), near f. With a switching frequency fsw whose product with dt
// is a fraction p/q (q ≤ 1000), n is a multiple of q so the record also
// holds whole ripple cycles: the ripple's alias then falls exactly on a
// DFT bin and leaks nothing into the tone's (rectangular window over
// whole cycles: the bins are orthogonal). The search takes c from cycles
// up, the first plan whose tone is within 0.2% of f (else the closest),
// and skips plans whose ripple bin is the tone's or its 2nd or 3rd
// harmonic's. Without fsw it is wholeCyclePoints.
func recordFor(cycles int, f, dt, fsw float64, maxP int) (n int, c float64, rippleBin int, ok bool) {
	q := 0
	if fsw > 0 {
		x := fsw * dt
		for k := 1; k <= maxRippleDenom; k++ {
			if v := x * float64(k); math.Abs(v-math.Round(v)) <= 1e-9*math.Max(1, v) {
				q = k
				break
			}
		}
	}
	if q == 0 {
		n, c := wholeCyclePoints(cycles, f*dt, maxP)
		return n, c, -1, fsw == 0
	}
	r := f * dt
	// Leave room for the search below the record limit.
	cycles = max(1, min(cycles, int(float64(maxP)*r/1.25)))
	bestN, bestC, bestA, bestShift := 0, 0, 0, math.Inf(1)
	for c := cycles; c <= cycles*maxCycleGrowth; c++ {
		n := q * int(math.Round(float64(c)/(r*float64(q))))
		if n < q {
			n = q
		}
		if n > maxP {
			break
		}
		if float64(c)/float64(n) > 1/float64(minPerCycleMin) {
			continue
		}
		m := int(math.Round(fsw * float64(n) * dt)) // ripple cycles in the record
		a := m % n
		if a > n/2 {
			a = n - a
		}
		if a == c || a == 2*c || a == 3*c {
			continue
		}
		shift := math.Abs(float64(c)/(float64(n)*r) - 1)
		if shift < bestShift {
			bestN, bestC, bestA, bestShift = n, c, a, shift
		}
		if shift <= maxToneShift {
			break
		}
	}
	if bestN == 0 || bestShift > 0.05 {
		n, c := wholeCyclePoints(cycles, f*dt, maxP)
		return n, c, -1, false
	}
	return bestN, float64(bestC), bestA, true
}

// clipEdge is the fraction of the window, at each edge, where a sample
// counts as clipped: an ADC's top code sits one LSB inside the window
// (2^-7 of the range at 8 bits), so the exact limit is never read.
const clipEdge = 0.01

// clipWindow is the clip check for a channel's window.
func clipWindow(ch instr.ChannelSettings) analysis.ToneOptions {
	return analysis.ToneOptions{
		ClipLow:  ch.OffsetV - ch.RangeV*(1-clipEdge),
		ClipHigh: ch.OffsetV + ch.RangeV*(1-clipEdge),
	}
}

// extent is the lowest and highest sample of a raw record, volts.
type extent struct{ lo, hi float64 }

func extentOf(x []float64) extent {
	e := extent{math.Inf(1), math.Inf(-1)}
	for _, v := range x {
		e.lo, e.hi = math.Min(e.lo, v), math.Max(e.hi, v)
	}
	return e
}

// about is the record's largest excursion from centre, volts: the
// half-window a window centred there needs to hold every sample.
func (e extent) about(centre float64) float64 {
	return math.Max(e.hi-centre, centre-e.lo)
}

// clipped says whether a sample is at or beyond the window's limits.
func clipped(x []float64, o analysis.ToneOptions) bool {
	for _, v := range x {
		if v <= o.ClipLow || v >= o.ClipHigh {
			return true
		}
	}
	return false
}

// removeBin subtracts from x its component on DFT bin k of len(x)
// (0 < k ≤ len(x)/2): the ripple's alias when the record holds whole
// ripple cycles. On whole cycles the bins are orthogonal, so the tone,
// its harmonics and DC are untouched; the ripple no longer counts as
// noise in the tone's SNR.
func removeBin(x []float64, k int) {
	n := len(x)
	if k <= 0 || 2*k > n {
		return
	}
	var re, im float64
	w := 2 * math.Pi * float64(k) / float64(n)
	for i, v := range x {
		s, c := math.Sincos(w * float64(i))
		re += v * c
		im += v * s
	}
	scale := 2 / float64(n)
	if 2*k == n {
		scale = 1 / float64(n)
	}
	re, im = re*scale, im*scale
	for i := range x {
		s, c := math.Sincos(w * float64(i))
		x[i] -= re*c + im*s
	}
}

// Ranging while the loop settles (engineering choices): the first
// point has no earlier reading to set the input windows from, so short
// records taken during its settling wait learn the DC level and the
// windows (the initial range, then finer ones), instead of full records
// taken again after it.
const (
	// rangingCycles per ranging record: enough for the Hann-window fit
	// of DC, tone and noise that sets a window.
	rangingCycles = 2.0
	// rangingCaptures at most: from the initial range a coarse window,
	// then a fine one, then one more if a channel clipped.
	rangingCaptures = 3
	// rangingExchange is allowed per ranging record on top of its own
	// time, for its Configure, transfer and fit.
	rangingExchange = 2 * time.Millisecond
)

// rangeWhileSettling sets the input windows (e.chans, through autorange)
// from short records of the tone, taken during the settling wait that
// ends at settled and as late in it as they fit, so the loop is as near
// its steady state as the wait allows. Only the windows are learned:
// the attempt's own record is still captured after settled, and the
// caller configures it again. It takes none when no ranging record fits
// before settled; a ranging fit that fails ends the ranging (the
// attempt's own captures then range as before). want and got are the
// attempt's record as planned and as configured.
//
// It also returns the linear SNR per cycle of record on the weaker
// channel, A²/(2σ²) per sample (the rectangular fit's SNR = N·A²/(2σ²),
// analysis) times the samples per cycle, from the last ranging record
// that fitted unclipped; 0 when there is none.
func (e *Engine) rangeWhileSettling(ctx, stepCtx context.Context, want, got instr.CaptureSettings, tone float64, settled time.Time) (float64, error) {
	n := int(math.Ceil(rangingCycles / (tone * got.IntervalS)))
	if n >= got.Points {
		return 0, nil
	}
	perCycle := 0.0
	per := time.Duration(float64(n)*got.IntervalS*float64(time.Second)) + rangingExchange
	for k := 0; k < rangingCaptures; k++ {
		// Room for this record and, after the last, the attempt's Configure.
		left := settled.Sub(e.cfg.Now())
		if left < per+rangingExchange {
			break
		}
		if wait := left - time.Duration(rangingCaptures-k)*per - rangingExchange; wait > 0 {
			if err := e.sleep(ctx, stepCtx, wait); err != nil {
				return 0, err
			}
		}
		if e.interrupted() {
			return 0, errInterrupted
		}
		w := want
		w.Points, w.Channels = n, e.chans
		g, err := e.configure(ctx, w, tone)
		if err != nil {
			return 0, err
		}
		if err := e.joinSave(); err != nil {
			return 0, fmt.Errorf("save session: %w", err)
		}
		b1, b2 := e.buf1[:g.Points], e.buf2[:g.Points]
		if err := e.cfg.Dig.Capture(ctx, b1, b2); err != nil {
			return 0, fmt.Errorf("ranging capture of %d points at %g Hz: %w", g.Points, tone, err)
		}
		o1, o2 := clipWindow(g.Channels[0]), clipWindow(g.Channels[1])
		o1.Window, o2.Window = analysis.Hann, analysis.Hann
		t1, t2, err := analysis.EstimatePair(b1, b2, g.IntervalS, tone, o1, o2)
		if err != nil {
			break
		}
		if !t1.Clipped && !t2.Clipped && t1.NoiseRMS > 0 && t2.NoiseRMS > 0 {
			spc := 1 / (tone * g.IntervalS)
			perCycle = math.Min(sq(t1.AmpPeak/t1.NoiseRMS), sq(t2.AmpPeak/t2.NoiseRMS)) / 2 * spc
		} else {
			perCycle = 0
		}
		if !e.autorange(t1, t2, [2]extent{extentOf(b1), extentOf(b2)}, g) {
			break
		}
	}
	return perCycle, nil
}

// lengthenRecord returns the points (and the ripple's bin) of a record
// of n samples holding c whole cycles of tone, lengthened to hold at
// least need cycles at the same tone and sample interval: k·n/g samples
// for k·c/g cycles, g = gcd(n, c), so the tone needs no new setting and
// no new settling wait (with a ripple bin, whole multiples of the record,
// which keep the ripple's cycles whole and put its alias on bin k·bin).
// It stays within cycleCap and the digitizer's points, and never
// shortens the record.
func (e *Engine) lengthenRecord(set Settings, n, c, rippleBin int, tone float64, need int) (int, int) {
	if need <= c || n <= 0 || c <= 0 {
		return n, rippleBin
	}
	p, q := n, c
	if rippleBin <= 0 {
		g := gcd(n, c)
		p, q = n/g, c/g
	}
	k := (need + q - 1) / q
	k = min(k, e.cfg.MaxPoints/p, cycleCap(set, tone)/q)
	if k*q <= c {
		return n, rippleBin
	}
	if rippleBin > 0 {
		rippleBin *= k
	}
	return k * p, rippleBin
}

func gcd(a, b int) int {
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

// configure sends the capture settings unless they equal the last ones
// and returns what the digitizer chose.
func (e *Engine) configure(ctx context.Context, want instr.CaptureSettings, f float64) (instr.CaptureSettings, error) {
	if e.haveGot && want == e.lastWant {
		return e.lastGot, nil
	}
	got, err := e.cfg.Dig.Configure(ctx, want)
	if err != nil {
		return got, fmt.Errorf("configure the digitizer for %g Hz (%d points at %g s): %w", f, want.Points, want.IntervalS, err)
	}
	if !(got.IntervalS > 0) || got.Points <= 0 {
		return got, fmt.Errorf("configure the digitizer for %g Hz: it reported %d points at %g s", f, got.Points, got.IntervalS)
	}
	e.dtCache[want.IntervalS] = got.IntervalS
	if got.Points > len(e.buf1) {
		e.buf1 = make([]float64, got.Points)
		e.buf2 = make([]float64, got.Points)
	}
	e.lastWant, e.lastGot, e.haveGot = want, got, true
	return got, nil
}

// wholeCyclePoints returns the record length n ≤ maxP and the cycle
// count c (cycles, or fewer when the limit demands) for r cycles per
// sample: n = round(c/r). The tone is then moved to c/(n·dt), a relative
// shift of at most r/(2c) = 1/(2·samples per cycle·cycles).
func wholeCyclePoints(cycles int, r float64, maxP int) (int, float64) {
	if lim := int(math.Floor(float64(maxP) * r)); cycles > lim {
		cycles = max(lim, 1)
	}
	n := int(math.Round(float64(cycles) / r))
	n = max(1, min(n, maxP))
	return n, float64(cycles)
}

// autorange sets each channel's window for the next capture from this
// reading and says whether this one must be taken again: the DC level was
// just learned, a channel clipped (and a larger range remains), or a
// window was far too large for the tone. ext is each channel's raw
// record (ripple, noise and tone, before any ripple removal).
func (e *Engine) autorange(t1, t2 analysis.Tone, ext [2]extent, got instr.CaptureSettings) bool {
	again := false
	for c, t := range [2]analysis.Tone{t1, t2} {
		ch := got.Channels[c]
		want := math.Max(rangeHeadroom*t.AmpPeak+6*t.NoiseRMS, e.cfg.MinRangeV)
		off := ch.OffsetV
		if e.cfg.FixedOffset && !ch.AC && !e.cfg.ACCoupling {
			// The window cannot move: it must hold the DC level too.
			want = math.Max(want, math.Abs(t.DC-off)+rangeHeadroom*t.AmpPeak+6*t.NoiseRMS)
		} else if !ch.AC && !e.cfg.ACCoupling {
			if !e.dcKnown || math.Abs(t.DC-off) > math.Max(want, swingHeadroom*ext[c].about(t.DC))/4 {
				off = t.DC
			}
		}
		// Everything else on the probe (ripple, noise peaks) must fit too,
		// about the centre the window will have. The fitted DC is not
		// that centre: with AC coupling or a fixed offset the window stays
		// where it is, and a ripple aliased near 0 Hz moves the fitted DC
		// without moving the samples.
		want = math.Max(want, swingHeadroom*ext[c].about(off))
		r := ch.RangeV
		switch {
		case t.Clipped:
			if r < e.cfg.MaxRangeV {
				r = math.Min(r*4, e.cfg.MaxRangeV)
				again = true
			}
			if !e.dcKnown {
				off = ch.OffsetV
			}
		case r > overRange*want:
			r = want
			again = true
		case r < want || r > rangeHysteresis*want:
			r = want
		}
		if off != ch.OffsetV && math.Abs(off-ch.OffsetV)+t.AmpPeak > r {
			again = true
		}
		e.chans[c] = instr.ChannelSettings{RangeV: r, OffsetV: off, AC: ch.AC || e.cfg.ACCoupling}
	}
	if !e.dcKnown {
		e.dcKnown = true
		again = true
	}
	e.ranged = true
	return again
}
