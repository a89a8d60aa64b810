//go:build !linux

package sa_test

import "time"

var clockStart = time.Now()

// threadTime falls back to wall time where the thread's processor-time
// clock (clock_gettime(CLOCK_THREAD_CPUTIME_ID)) is not used.
func threadTime() time.Duration { return time.Since(clockStart) }
