//go:build !unix || aix

package statedir

import (
	"errors"
	"fmt"
	"os"
	"runtime"
)

// lockingSupported says whether this system has flock(2): here it has not.
func lockingSupported() error {
	return fmt.Errorf("locking a state directory needs flock(2), which %s lacks: %w", runtime.GOOS, errors.ErrUnsupported)
}

var errHeld = errors.New("lock held")

func lockFile(*os.File) error   { return lockingSupported() }
func unlockFile(*os.File) error { return lockingSupported() }
