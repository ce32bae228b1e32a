//go:build unix

package report

import (
	"syscall"
	"time"
)

// cpuTime is the processor time this process has used so far (user and
// system, all threads): on a machine shared with other work, the time a
// request cost the server, apart from the time it waited for a processor.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
