package sa

import (
	"bufio"
	"io"
	"iter"
	"math"
	"strconv"
)

// DefaultTraceMax is the number of records a trace keeps when Tracing.Max
// is 0.
const DefaultTraceMax = 1024

// Tracing asks a run to record its progress every Every steps in bounded
// memory. When Max records are held, every second one is dropped and the
// interval doubles, so the trace always spans the whole run with between
// Max/2 and Max records. Memory is Max·(3d+4) float64s, allocated once
// before the first step; recording allocates nothing. Settings that would
// need more than MaxBufferBytes for it are refused (ErrSettings).
type Tracing struct {
	// Every is the number of steps between records, ≥ 1.
	Every int
	// Max is the most records kept, ≥ 2. 0 means DefaultTraceMax.
	Max int
}

// resolve validates t for dimension d and fills in defaults. The storage of
// Max records of 4 + 3d float64s must fit in MaxBufferBytes.
func (t Tracing) resolve(d int) (Tracing, error) {
	if t.Every < 1 {
		return t, settingsErr("Tracing.Every = %d: the interval between records must be ≥ 1 step", t.Every)
	}
	switch {
	case t.Max == 0:
		t.Max = DefaultTraceMax
	case t.Max < 2:
		return t, settingsErr("Tracing.Max = %d: must be ≥ 2 (0 means %d)", t.Max, DefaultTraceMax)
	}
	if need := traceBytes(t.Max, d); need > MaxBufferBytes {
		return t, settingsErr("Tracing.Max = %d: %d records of dimension %d need %d bytes, more than MaxBufferBytes = %d; lower Max", t.Max, t.Max, d, need, MaxBufferBytes)
	}
	return t, nil
}

// traceBytes returns the bytes of max records of dimension d.
func traceBytes(max, d int) uint64 {
	return mulBytes(mulBytes(count(max), addBytes(4, mulBytes(3, count(d)))), 8)
}

// TracePoint is one record of a trace: the state after Step updates.
//
// X, Average and HalfWidth share the trace's storage: read them, do not
// modify or retain them beyond the trace's life. Average is nil before the
// first averaged iterate and HalfWidth is nil while the error bars are not
// yet available (see ErrNotAvailable).
type TracePoint struct {
	// Step is the number of updates applied; the last one used gain Gain
	// and a measurement of Euclidean norm MeasurementNorm.
	Step            int
	Measurements    int
	Gain            float64
	MeasurementNorm float64
	// X is the iterate, Average the Polyak–Ruppert average.
	X, Average []float64
	// HalfWidth[i] is the confidence half-width of Average[i] at the
	// level of the run's Inference.
	HalfWidth []float64
}

// Trace is the record of a run requested with Settings.Trace. A Trace in a
// Result is a snapshot: it does not change afterwards. The last state of
// the run is always the last record, also when its step is not a multiple
// of Every.
type Trace struct {
	d, cols int
	every   int
	max     int
	n       int       // records held
	level   float64   // confidence level of the half-widths
	data    []float64 // n·cols: step, meas, gain, ‖Y‖, x, avg, half (NaN = not available)
}

func newTrace(d int, t Tracing, level float64) *Trace {
	cols := 4 + 3*d
	return &Trace{d: d, cols: cols, every: t.Every, max: t.Max, level: level, data: make([]float64, 0, t.Max*cols)}
}

// Len returns the number of records.
func (t *Trace) Len() int { return t.n }

// Every returns the current number of steps between records.
func (t *Trace) Every() int { return t.every }

// Level returns the confidence level of the recorded half-widths.
func (t *Trace) Level() float64 { return t.level }

// Dim returns the dimension of the recorded vectors.
func (t *Trace) Dim() int { return t.d }

// At returns record i, 0 ≤ i < Len(). It panics if i is out of range.
func (t *Trace) At(i int) TracePoint {
	if i < 0 || i >= t.n {
		panic("sa: trace index out of range")
	}
	row := t.data[i*t.cols : (i+1)*t.cols]
	d := t.d
	p := TracePoint{
		Step: int(row[0]), Measurements: int(row[1]), Gain: row[2], MeasurementNorm: row[3],
		X: row[4 : 4+d : 4+d],
	}
	if avg := row[4+d : 4+2*d : 4+2*d]; !math.IsNaN(avg[0]) {
		p.Average = avg
	}
	if h := row[4+2*d:]; !math.IsNaN(h[0]) {
		p.HalfWidth = h
	}
	return p
}

// All returns the records in order of step.
func (t *Trace) All() iter.Seq[TracePoint] {
	return func(yield func(TracePoint) bool) {
		for i := range t.n {
			if !yield(t.At(i)) {
				return
			}
		}
	}
}

// WriteCSV writes the trace as comma-separated values with a header line:
//
//	step,measurements,gain,measurement_norm,x_1,…,x_d,average_1,…,average_d,half_width_1,…,half_width_d
//
// Numbers are written in the shortest form that reads back exactly; a
// value that does not exist yet (the average before the first averaged
// iterate, a half-width before the error bars are available) is an empty
// field.
func (t *Trace) WriteCSV(w io.Writer) error {
	bw := bufio.NewWriter(w)
	buf := []byte("step,measurements,gain,measurement_norm")
	for _, name := range [...]string{"x_", "average_", "half_width_"} {
		for i := range t.d {
			buf = append(buf, ',')
			buf = append(buf, name...)
			buf = strconv.AppendInt(buf, int64(i+1), 10)
		}
	}
	buf = append(buf, '\n')
	if _, err := bw.Write(buf); err != nil {
		return err
	}
	for i := range t.n {
		row := t.data[i*t.cols : (i+1)*t.cols]
		buf = strconv.AppendInt(buf[:0], int64(row[0]), 10)
		buf = append(buf, ',')
		buf = strconv.AppendInt(buf, int64(row[1]), 10)
		for _, v := range row[2:] {
			buf = append(buf, ',')
			if !math.IsNaN(v) {
				buf = strconv.AppendFloat(buf, v, 'g', -1, 64)
			}
		}
		buf = append(buf, '\n')
		if _, err := bw.Write(buf); err != nil {
			return err
		}
	}
	return bw.Flush()
}

// due reports whether the state after steps updates is to be recorded.
func (t *Trace) due(steps int) bool { return steps%t.every == 0 }

// record appends the core's current state. It allocates nothing.
func (t *Trace) record(c *core) {
	if t.n == t.max {
		t.thin()
		if !t.due(c.steps) {
			return
		}
	}
	t.data = t.data[:(t.n+1)*t.cols]
	row := t.data[t.n*t.cols:]
	t.n++
	t.fill(row, c, c.lastGain, c.lastNorm)
}

func (t *Trace) fill(row []float64, c *core, a, ynorm float64) {
	d := t.d
	row[0] = float64(c.steps)
	row[1] = float64(c.steps * c.perCall)
	row[2] = a
	row[3] = ynorm
	copy(row[4:4+d], c.x)
	avg, half := row[4+d:4+2*d], row[4+2*d:4+3*d]
	if c.nAvg > 0 {
		copy(avg, c.avg)
	} else {
		for i := range avg {
			avg[i] = math.NaN()
		}
	}
	if c.inf == nil || !c.inf.traceHalfWidths(half, c.avg, c.nAvg) {
		for i := range half {
			half[i] = math.NaN()
		}
	}
}

// thin keeps every second record (those at multiples of twice the
// interval) and doubles the interval.
func (t *Trace) thin() {
	k := 0
	for i := 1; i < t.n; i += 2 {
		copy(t.data[k*t.cols:(k+1)*t.cols], t.data[i*t.cols:(i+1)*t.cols])
		k++
	}
	t.n = k
	t.data = t.data[:k*t.cols]
	t.every *= 2
}

// snapshot returns a copy of the trace that ends with the core's current
// state.
func (t *Trace) snapshot(c *core) *Trace {
	s := *t
	extra := 0
	if c.steps > 0 && (t.n == 0 || int(t.data[(t.n-1)*t.cols]) != c.steps) {
		extra = 1
	}
	s.data = make([]float64, t.n*t.cols, (t.n+extra)*t.cols)
	copy(s.data, t.data[:t.n*t.cols])
	if extra == 1 {
		s.data = s.data[:(t.n+1)*t.cols]
		s.fill(s.data[t.n*t.cols:], c, c.lastGain, c.lastNorm)
		s.n++
	}
	return &s
}
