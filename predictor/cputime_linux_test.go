package predictor

import (
	"syscall"
	"time"
	"unsafe"
)

// threadCPU returns the CPU time consumed by the calling OS thread
// (clock_gettime(CLOCK_THREAD_CPUTIME_ID), Linux). Benchmarks lock the
// goroutine to its thread (runtime.LockOSThread) before using it; on a shared
// machine it is steadier than wall time, because time spent waiting for a
// core is not counted.
func threadCPU() time.Duration {
	const clockThreadCPUTimeID = 3 // <linux/time.h>
	var ts syscall.Timespec
	if _, _, e := syscall.RawSyscall(syscall.SYS_CLOCK_GETTIME, clockThreadCPUTimeID, uintptr(unsafe.Pointer(&ts)), 0); e != 0 {
		return 0
	}
	return time.Duration(ts.Nano())
}
