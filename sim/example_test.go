package sim_test

import (
	"fmt"
	"os"

	"modewatch/sim"
)

const tiny = `
name: two pumps
seed: 1
start: 2026-05-04T00:00:00Z
duration: 1m
period: 20s
drivers:
  - {name: speed, mean: 1450, steps: {levels: [-50, 0, 50], hold: 2h}}
units:
  - name: water
    assets:
      - name: pump
        count: 2
        channels:
          - {name: flow, eng_unit: m3/h, base: 100, noise: 0.5, decimals: 1, terms: {speed: 0.2}}
          - {name: power, eng_unit: kW, base: 20, noise: 0.2, decimals: 2, terms: {speed: 0.03}}
faults:
  - {id: P2-stuck, kind: stuck, start: 20s, end: 1m, channels: [water.pump02.flow]}
`

// A scenario is parsed once; the generator then yields one nominal sample at
// a time, each as line protocol (one line per asset). Here pump02's flow is
// stuck from 20 s on and repeats 100.5.
func ExampleLoadBytes() {
	s, err := sim.LoadBytes("tiny.yaml", []byte(tiny))
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, c := range s.Channels() {
		fmt.Println(c.Name, c.EngUnit)
	}
	if err := s.WriteLineProtocol(os.Stdout); err != nil {
		fmt.Println(err)
	}
	// Output:
	// water.pump01.flow m3/h
	// water.pump01.power kW
	// water.pump02.flow m3/h
	// water.pump02.power kW
	// water,asset=pump01 flow=100.5,power=20.26 1777852800000000000
	// water,asset=pump02 flow=100.6,power=19.8 1777852800000000000
	// water,asset=pump01 flow=99.1,power=20.09 1777852820000000000
	// water,asset=pump02 flow=100.5,power=20.01 1777852820000000000
	// water,asset=pump01 flow=99.9,power=19.84 1777852840000000000
	// water,asset=pump02 flow=100.5,power=20.1 1777852840000000000
}

// The truth file lists the labelled faults with channel names in the
// auto-discovery form unit.asset.field.
func ExampleScenario_WriteTruth() {
	s, err := sim.LoadBytes("tiny.yaml", []byte(tiny))
	if err != nil {
		fmt.Println(err)
		return
	}
	if err := s.WriteTruth(os.Stdout); err != nil {
		fmt.Println(err)
	}
	// Output:
	// {
	//   "episodes": [
	//     {
	//       "id": "P2-stuck",
	//       "start": "2026-05-04T00:00:20Z",
	//       "end": "2026-05-04T00:01:00Z",
	//       "kind": "stuck",
	//       "channels": [
	//         "water.pump02.flow"
	//       ]
	//     }
	//   ]
	// }
}

// Scenario errors name file, line and column, all at once.
func ExampleLoadBytes_errors() {
	_, err := sim.LoadBytes("bad.yaml", []byte(`
seed: 1
start: 2026-05-04T00:00:00Z
duration: 1h
period: 20s
units:
  - name: water
    assets:
      - name: pump
        channels:
          - {name: flow, eng_unit: m3/h, base: 100, noise: -0.5, terms: {sped: 0.2}}
`))
	fmt.Println(err)
	// Output:
	// sim: bad.yaml: 2 problem(s) in scenario
	//   bad.yaml:11:60: units[0].assets[0].channels[0].noise: must be ≥ 0
	//   bad.yaml:11:74: units[0].assets[0].channels[0].terms.sped: unknown driver "sped"
}

// The demo plant ships inside the binary.
func ExampleDemo() {
	s, err := sim.Demo()
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(len(s.Units), "units,", len(s.Channels()), "channels,", s.Samples(), "samples,", len(s.Episodes), "faults")
	fmt.Println("normal before", s.Split.Sub(s.Start), "then", s.End().Sub(s.Split), "of test days")
	for _, e := range s.Episodes {
		fmt.Println(e.ID, e.Kind, e.Start.Sub(s.Split), e.End.Sub(s.Split), e.Channels)
	}
	// Output:
	// 4 units, 50 channels, 25920 samples, 7 faults
	// normal before 96h0m0s then 48h0m0s of test days
	// F1-header-bias bias 4h0m0s 10h0m0s [air.header.pressure]
	// F2-supply-drift drift 12h0m0s 20h0m0s [coolwater.tower.supply_temp]
	// F3-return-stuck stuck 16h0m0s 22h0m0s [chill.chiller02.chw_return_temp]
	// F4-vibration-noise noise 23h0m0s 26h0m0s [air.comp1.vibration]
	// F5-pump-relation relation 28h0m0s 34h0m0s [coolwater.pump02.flow coolwater.pump02.motor_power coolwater.pump02.discharge_pressure]
	// F6-hx-fouling effect 35h0m0s 46h0m0s [coolwater.hx1.process_out_temp]
	// F7-o2-spikes spikes 38h0m0s 40h0m0s [steam.boiler1.o2]
}
