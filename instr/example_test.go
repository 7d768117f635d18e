package instr_test

import (
	"fmt"

	"loopsweep/instr"
)

func ExampleParseAddress() {
	for _, s := range []string{
		"TCPIP0::192.168.1.20::5025::SOCKET",
		"scope.lab:5025",
		"ASRL/dev/ttyUSB0::INSTR",
		"serial:///dev/ttyUSB1?baud=115200&parity=even",
		"/dev/usbtmc0",
	} {
		a, err := instr.ParseAddress(s)
		if err != nil {
			fmt.Println(err)
			continue
		}
		fmt.Println(a)
	}
	_, err := instr.ParseAddress("TCPIP::192.168.1.20::INSTR")
	fmt.Println(err != nil)
	// Output:
	// tcp://192.168.1.20:5025
	// tcp://scope.lab:5025
	// serial:///dev/ttyUSB0?baud=9600&data=8&parity=none&stop=1&flow=none
	// serial:///dev/ttyUSB1?baud=115200&data=8&parity=even&stop=1&flow=none
	// usbtmc:///dev/usbtmc0
	// true
}

func ExampleParseErrorReply() {
	code, text, err := instr.ParseErrorReply(`-222,"Data out of range; ""FREQ"" above 20 MHz"`)
	fmt.Println(code, text, err)
	// Output:
	// -222 Data out of range; "FREQ" above 20 MHz <nil>
}

func ExampleParseProfile() {
	_, err := instr.ParseProfile("scope.toml", []byte(`kind = "digitizer"
name = "scope"
[digitizer]
points = "ACQ:POIN {n}"
interval = "ACQ:TINT {seconds}"
range = "CH{ch}:RANG {v}"
start = ["SING"]
fetch = "CH{ch}:DATA?"
[digitizer.data]
format = "real32"
`))
	fmt.Println(err)
	// Output:
	// profile scope.toml:5: key digitizer.interval: template "ACQ:TINT {seconds}": unknown placeholder {seconds} (allowed here: {s})
}
