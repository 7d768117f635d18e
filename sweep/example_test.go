package sweep_test

import (
	"fmt"

	"loopsweep/sweep"
)

func ExampleParseSI() {
	for _, s := range []string{"100", "2.2k", "10kHz", "1.5M"} {
		v, _ := sweep.ParseSI(s, "Hz")
		fmt.Println(v)
	}
	a, _ := sweep.ParseSI("20mV", "V")
	fmt.Println(a)
	// Output:
	// 100
	// 2200
	// 10000
	// 1.5e+06
	// 0.02
}

func ExampleSettings_Plan() {
	s := sweep.Defaults()
	s.StartHz, s.StopHz, s.PerDecade = 100, 1000, 2
	for _, f := range s.Plan() {
		fmt.Printf("%.1f\n", f)
	}
	// Output:
	// 100.0
	// 316.2
	// 1000.0
}
