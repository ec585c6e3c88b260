//go:build !unix

package radio

import (
	"errors"
	"time"
)

// PTY is a pseudo-terminal; this system has none.
type PTY struct{}

// ErrNoPTY: this system has no pseudo-terminals.
var ErrNoPTY = errors.New("pseudo-terminals need a unix system")

// OpenPTY fails with ErrNoPTY on this system.
func OpenPTY() (*PTY, string, error) { return nil, "", ErrNoPTY }

// Path returns "".
func (p *PTY) Path() string { return "" }

// Read fails with ErrNoPTY.
func (p *PTY) Read([]byte) (int, error) { return 0, ErrNoPTY }

// Write fails with ErrNoPTY.
func (p *PTY) Write([]byte) (int, error) { return 0, ErrNoPTY }

// Close does nothing.
func (p *PTY) Close() error { return nil }

// SetDeadline fails with ErrNoPTY.
func (p *PTY) SetDeadline(time.Time) error { return ErrNoPTY }
