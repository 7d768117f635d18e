package sweep

import (
	"math"
	"strings"
	"testing"
)

// The summary carries the modulus margin's uncertainty as computed by
// analysis.ComputeMargins (checked there by Monte-Carlo and closed form)
// and prints it beside the margin.
func TestSummaryModulusSigma(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	_, s := r.run(t)
	m, err := s.Margins()
	if err != nil {
		t.Fatal(err)
	}
	j, err := Summary(&s)
	if err != nil {
		t.Fatal(err)
	}
	if j.ModulusSigma == nil || j.ModulusMargin == nil {
		t.Fatalf("modulus margin %v ± %v; want both", j.ModulusMargin, j.ModulusSigma)
	}
	if *j.ModulusSigma != m.ModulusSigma || !(m.ModulusSigma > 0) || math.IsInf(m.ModulusSigma, 0) {
		t.Errorf("modulus_margin_sigma %g, margins say %g", *j.ModulusSigma, m.ModulusSigma)
	}
	var b strings.Builder
	if err := j.WriteText(&b); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "modulus margin: ") || !strings.Contains(b.String(), " ± ") {
		t.Errorf("summary text lacks the modulus margin's uncertainty:\n%s", b.String())
	}
}
