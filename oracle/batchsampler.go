package oracle

import "github.com/stochroot/stochroot/sampling"

// Sampler returns the sampler that draws b's batches, or nil for a full
// batch ([NewFullBatch]). The sampler is still owned by b: callers may
// inspect it (its type, Len) but must not call Fill or Reset on it. The
// drivers use it to decide how error bars can be computed: draws without
// replacement or in a fixed order are not independent from step to step.
func (b *MiniBatch) Sampler() sampling.Sampler { return b.s }
