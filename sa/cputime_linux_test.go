//go:build linux

package sa_test

import (
	"syscall"
	"time"
)

// threadTime returns the processor time the calling thread has used
// (getrusage(RUSAGE_THREAD), Linux). With the goroutine locked to its
// thread, the difference of two readings is the time the code between them
// ran on a core, without the time the thread waited for one: on a shared,
// oversubscribed machine that is far steadier than wall time, which counts
// every descheduling.
func threadTime() time.Duration {
	const rusageThread = 1 // RUSAGE_THREAD
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// threadClock names what threadTime measures, for benchmark output.
const threadClock = "thread CPU time"
