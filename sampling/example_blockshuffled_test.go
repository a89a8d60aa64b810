package sampling_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/sampling"
)

// Batches of 3 from 12 items in blocks of 4 consecutive items: every item
// once per epoch; the items of one block come together, and those of one
// block in one batch come in ascending order.
func ExampleBlockShuffled() {
	s := sampling.NewBlockShuffled(12, 4)
	rng := rand.New(rand.NewPCG(1, 2))
	batch := make([]int, 3)
	for range 4 {
		s.Fill(batch, rng)
		fmt.Println(batch)
	}
	fmt.Println("epochs completed:", s.Epoch())
	// Output:
	// [5 6 7]
	// [4 2 3]
	// [0 1 10]
	// [8 9 11]
	// epochs completed: 1
}
