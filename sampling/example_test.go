package sampling_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/sampling"
)

// Mini-batches of 4 from 10 items without replacement: every item once per
// epoch; the third batch crosses into the second epoch.
func ExampleShuffled() {
	s := sampling.NewShuffled(10)
	rng := rand.New(rand.NewPCG(1, 2))
	batch := make([]int, 4)
	for range 3 {
		s.Fill(batch, rng)
		fmt.Println(batch, "epochs completed:", s.Epoch())
	}
	// Output:
	// [4 2 3 6] epochs completed: 0
	// [9 1 8 0] epochs completed: 0
	// [5 7 9 5] epochs completed: 1
}
