//go:build !linux

package sa_test

import "time"

var clockStart = time.Now()

// threadTime falls back to wall time where getrusage(RUSAGE_THREAD) is
// not available.
func threadTime() time.Duration { return time.Since(clockStart) }

// threadClock names what threadTime measures, for benchmark output.
const threadClock = "wall time"
