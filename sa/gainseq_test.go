package sa

import (
	"math"
	"testing"
	"time"

	"github.com/stochroot/stochroot/schedule"
)

// TestPowerGainsAccuracy compares the incremental Power gains with
// a·(k+1+A)^−α from math.Pow (Go's standard library as the reference) over
// long consecutive runs, across block boundaries and after jumps, and
// checks the bound stated on powerGains: relative error < 5·10⁻¹³
// (powerBlock·4·2⁻⁵³ ≈ 4.6·10⁻¹³ from the rounding of < powerBlock
// products; the series truncation adds < 10⁻¹⁴ over a block).
func TestPowerGainsAccuracy(t *testing.T) {
	const bound = 5e-13
	for _, p := range []schedule.Power{
		{Scale: 1, Exponent: 0.6},
		{Scale: 0.3, Exponent: 0.501},
		{Scale: 2, Offset: 100, Exponent: 0.75},
		{Scale: 1e-3, Offset: 0.5, Exponent: 0.9},
		{Scale: 5, Offset: 5000, Exponent: 2.5},
		{Scale: 1, Exponent: 8},
		{Scale: 1, Exponent: 1},
		{Scale: 1, Exponent: 0.5},
	} {
		g := newPowerGains(p)
		worst := 0.0
		check := func(k int) {
			got := g.gain(k)
			want := p.Scale / math.Pow(float64(k)+1+p.Offset, p.Exponent)
			if e := math.Abs(got/want - 1); e > worst {
				worst = e
			}
		}
		for k := range 200_000 {
			check(k)
			check(k) // the same index again
		}
		for _, k := range []int{1 << 20, 5_000_017, 1<<20 + 1023, 3, 1 << 40, 1<<40 + 1, 123_456_789} {
			check(k) // jumps forwards and backwards
		}
		for k := 1<<31 - 3000; k < 1<<31; k++ {
			check(k)
		}
		t.Logf("%+v: worst relative error %.2g", p, worst)
		if worst > bound {
			t.Errorf("%+v: worst relative error %.3g > %.3g", p, worst, bound)
		}
	}
}

// TestPowerGainsFunctionOfIndex: the gain of index k does not depend on
// the order in which indices were asked for, so a run and its replay from
// a snapshot (a jump to k) use the same bits.
func TestPowerGainsFunctionOfIndex(t *testing.T) {
	p := schedule.Power{Scale: 0.7, Offset: 3.25, Exponent: 0.66}
	seq := newPowerGains(p)
	vals := make([]float64, 20_000)
	for k := range vals {
		vals[k] = seq.gain(k)
	}
	for _, k := range []int{19_999, 4093, 4092, 4096, 5120, 5119, 12_345, 0, 7000} {
		fresh := newPowerGains(p)
		if got := fresh.gain(k); got != vals[k] {
			t.Errorf("k = %d: fresh %v, sequential %v", k, got, vals[k])
		}
		if got := seq.gain(k); got != vals[k] {
			t.Errorf("k = %d after a jump: %v, sequential %v", k, got, vals[k])
		}
	}
}

// TestPowerGainsAllocations: evaluating the gain allocates nothing.
func TestPowerGainsAllocations(t *testing.T) {
	g := newPowerGains(schedule.Power{Scale: 1, Exponent: 0.6})
	k := 10_000
	if n := testing.AllocsPerRun(1000, func() { g.gain(k); k++ }); n != 0 {
		t.Errorf("%v allocations per gain", n)
	}
}

// BenchmarkPowerGain: the incremental evaluation against Power.Gain
// (math.Pow), side by side in each op; "ratio" is incremental / Pow.
func BenchmarkPowerGain(b *testing.B) {
	p := schedule.Power{Scale: 1, Exponent: 0.6}
	const steps = 4096
	var sink float64
	var tPow, tInc int64
	k0 := 1 << 20
	b.ReportAllocs()
	for b.Loop() {
		g := newPowerGains(p)
		t0 := nanotime()
		for k := k0; k < k0+steps; k++ {
			sink += p.Gain(k)
		}
		t1 := nanotime()
		for k := k0; k < k0+steps; k++ {
			sink += g.gain(k)
		}
		t2 := nanotime()
		tPow += t1 - t0
		tInc += t2 - t1
		k0 += steps
	}
	n := float64(b.N) * steps
	b.ReportMetric(float64(tPow)/n, "pow-ns/gain")
	b.ReportMetric(float64(tInc)/n, "incremental-ns/gain")
	b.ReportMetric(float64(tInc)/float64(tPow), "ratio")
	if sink == 0 {
		b.Fatal("no gains")
	}
}

func nanotime() int64 { return time.Now().UnixNano() }
