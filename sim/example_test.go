package sim_test

import (
	"bufio"
	"fmt"
	"net"

	"loopsweep/sim"
)

// The true margins of a built-in scenario at each operating point.
func ExampleScenario_TrueMargins() {
	sc, err := sim.LoadScenario("marginal")
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, load := range sc.Loads() {
		tm, err := sc.TrueMargins(load)
		if err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("%s: crossover %.0f Hz, PM %.1f°, GM %.1f dB at %.0f Hz\n",
			load, *tm.CrossoverHz, *tm.PhaseMarginDeg, *tm.GainMarginDB, *tm.PhaseCrossoverHz)
	}
	// Output:
	// full: crossover 6325 Hz, PM 20.5°, GM 29.9 dB at 58828 Hz
	// light: crossover 6438 Hz, PM 17.9°, GM 29.6 dB at 58501 Hz
}

// Start the simulated bench on free loopback ports and ask the generator
// who it is.
func ExampleStart() {
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0", Scenario: "conditional"})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer srv.Close()
	c, err := net.Dial("tcp", srv.GenAddr())
	if err != nil {
		fmt.Println(err)
		return
	}
	defer c.Close()
	fmt.Fprint(c, "*IDN?;:OUTPut1:STATe?\n")
	line, _ := bufio.NewReader(c).ReadString('\n')
	fmt.Print(line)
	// Output:
	// Quillmere Bench Works,QG-20 simulated generator,SIM0001,1.0;0
}
