package schedule_test

import (
	"fmt"
	"math"

	"github.com/stochroot/stochroot/schedule"
)

func ExampleCheck() {
	fmt.Println(schedule.Check(schedule.Power{Scale: 1, Offset: 10, Exponent: 0.7}).Convergent())
	fmt.Println(schedule.Check(schedule.Constant(0.05)).SquaresConverge)

	// A schedule of the caller's own gets numerical evidence.
	own := schedule.Func(func(k int) float64 { return 0.5 / math.Pow(float64(k)+1, 1.5) })
	c := schedule.Check(own)
	fmt.Printf("%v %v proven=%v exponent≈%.3g\n", c.SumDiverges, c.SquaresConverge, c.Proven, c.Exponent)
	// Output:
	// true
	// fails
	// fails holds proven=false exponent≈1.5
}
