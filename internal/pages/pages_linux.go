package pages

import "golang.org/x/sys/unix"

// populate asks the kernel to map [addr, addr+n) writable now
// (MADV_POPULATE_WRITE, Linux 5.14 and later); errors are ignored.
func populate(addr, n uintptr) {
	unix.Syscall(unix.SYS_MADVISE, addr, n, unix.MADV_POPULATE_WRITE)
}
