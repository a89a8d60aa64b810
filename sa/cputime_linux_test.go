//go:build linux

package sa_test

import (
	"syscall"
	"time"
	"unsafe"
)

// threadTime returns the processor time the calling thread has used
// (clock_gettime(CLOCK_THREAD_CPUTIME_ID), Linux, nanosecond resolution).
// With the goroutine locked to its thread, the difference of two readings
// is the time the code between them ran on a core, without the time the
// thread waited for one: on a shared, oversubscribed machine that is far
// steadier than wall time, which counts every descheduling.
func threadTime() time.Duration {
	const clockThreadCPUTime = 3 // CLOCK_THREAD_CPUTIME_ID
	var ts syscall.Timespec
	if _, _, e := syscall.Syscall(syscall.SYS_CLOCK_GETTIME, clockThreadCPUTime, uintptr(unsafe.Pointer(&ts)), 0); e != 0 {
		return 0
	}
	return time.Duration(ts.Nano())
}
