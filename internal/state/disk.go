package state

import (
	"errors"
	"fmt"
	"sync/atomic"
	"syscall"
)

// ErrDiskLow is returned when the data directory's file system has less
// free space than the reserve. Badger writes through memory maps, and a
// full disk would end the process with SIGBUS in the middle of a write:
// touchledger stops writing before that.
var ErrDiskLow = errors.New("free disk space below the reserve")

// DiskGuard watches the free space of the file system holding Dir. The
// reserve is max(MinFree, MinFreeFraction × size of the file system).
// Safe for concurrent use.
type DiskGuard struct {
	Dir             string
	MinFree         uint64  // bytes
	MinFreeFraction float64 // of the file system's size, 0 to 1
	// Stat returns the free bytes (available to this user) and the size
	// of the file system holding dir; nil uses statfs(2).
	Stat func(dir string) (free, size uint64, err error)

	free, reserve atomic.Uint64
	low           atomic.Bool
}

// DiskStatus is one look at the free space.
type DiskStatus struct {
	Free, Size, Reserve uint64
	Low                 bool
}

// Check looks at the free space now; it returns ErrDiskLow (with the
// numbers) when it is below the reserve.
func (g *DiskGuard) Check() (DiskStatus, error) {
	stat := g.Stat
	if stat == nil {
		stat = statfs
	}
	free, size, err := stat(g.Dir)
	if err != nil {
		return DiskStatus{}, fmt.Errorf("state: free space of %s: %w", g.Dir, err)
	}
	st := DiskStatus{Free: free, Size: size, Reserve: max(g.MinFree, uint64(g.MinFreeFraction*float64(size)))}
	st.Low = free < st.Reserve
	g.free.Store(free)
	g.reserve.Store(st.Reserve)
	g.low.Store(st.Low)
	if st.Low {
		return st, fmt.Errorf("%w: %s has %d MiB free, the reserve is %d MiB (store.min_free_mib, store.min_free_percent)",
			ErrDiskLow, g.Dir, free>>20, st.Reserve>>20)
	}
	return st, nil
}

// Low reports the result of the last Check.
func (g *DiskGuard) Low() bool { return g.low.Load() }

// Free returns the free bytes and the reserve as of the last Check.
func (g *DiskGuard) Free() (free, reserve uint64) { return g.free.Load(), g.reserve.Load() }

func statfs(dir string) (free, size uint64, err error) {
	var s syscall.Statfs_t
	if err := syscall.Statfs(dir, &s); err != nil {
		return 0, 0, err
	}
	return s.Bavail * uint64(s.Bsize), s.Blocks * uint64(s.Bsize), nil
}
