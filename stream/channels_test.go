package stream

import (
	"fmt"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"
)

// TestNamesStable: the same data in another line and tag order gives the
// same channel names, each naming the same series field, so names (not
// indices) identify channels across runs.
func TestNamesStable(t *testing.T) {
	a := "coolwater,asset=pump2,zone=e flow=1,temp=2 1700000000000000000\nboiler,asset=b1 drum=3 1700000000000000000\n"
	b := "boiler,asset=b1 drum=3 1700000000000000000\ncoolwater,zone=e,asset=pump2 temp=2,flow=1 1700000000000000000\n"
	names := func(payload string) ([]string, map[string]float64) {
		in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
		in.Feed("x", []byte(payload))
		in.Flush()
		n := in.Channels().Names(nil)
		vals := map[string]float64{}
		for i, name := range n {
			vals[name] = s.frames[0].Values[i]
		}
		slices.Sort(n)
		return n, vals
	}
	na, va := names(a)
	nb, vb := names(b)
	if !slices.Equal(na, nb) || fmt.Sprint(va) != fmt.Sprint(vb) {
		t.Errorf("names %v vs %v, values %v vs %v", na, nb, va, vb)
	}
	if want := "[boiler.b1.drum coolwater.pump2.e.flow coolwater.pump2.e.temp]"; fmt.Sprint(na) != want {
		t.Errorf("names %v, want %s", na, want)
	}
}

// TestConcurrentReaders: Stats, Watermark and the registry may be read while
// payloads are fed from several goroutines (run with -race).
func TestConcurrentReaders(t *testing.T) {
	in, _ := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	var wg sync.WaitGroup
	done := make(chan struct{})
	wg.Add(1)
	go func() {
		defer wg.Done()
		for {
			select {
			case <-done:
				return
			default:
			}
			_ = in.Stats()
			_ = in.Watermark()
			_ = in.Channels().Names(nil)
			if n := in.Channels().Len(); n > 0 {
				_ = in.Channels().Channel(n - 1)
			}
		}
	}()
	var feeders sync.WaitGroup
	for g := 0; g < 2; g++ {
		feeders.Add(1)
		go func(g int) {
			defer feeders.Done()
			for s := 0; s < 50; s++ {
				line := fmt.Sprintf("u,asset=g%d f%d=1 %d\n", g, s%7, at(float64(s)).UnixNano())
				in.Feed("c", []byte(line))
			}
		}(g)
	}
	feeders.Wait()
	close(done)
	wg.Wait()
	in.Flush()
	if st := in.Stats(); st.Accepted != 100 || !strings.HasPrefix(in.Channels().Channel(0).Name, "u.g") {
		t.Errorf("stats %+v", st)
	}
}
