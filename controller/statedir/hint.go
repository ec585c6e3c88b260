package statedir

import (
	"errors"
	"fmt"
	"io/fs"
	"path/filepath"

	"github.com/tankd/tankd/controller/store"
)

// HintFile holds where the motor was after the daemon's latest operation: never trusted, but
// after a crash a far better first guess than nothing for finding the position again from a dip.
const HintFile = "last-position"

// HintPath is the position hint's path.
func (d *Dir) HintPath() string { return filepath.Join(d.path, HintFile) }

// WriteHint records where the motor stood after an operation, in the marker's format (Trusted
// says whether the daemon trusted it then; the reader never trusts it). Write it only when the
// position changed: the state directory may be on an SD card.
func (d *Dir) WriteHint(m Marker) error {
	if err := d.checkOpen(); err != nil {
		return fmt.Errorf("statedir: write position hint: %w", err)
	}
	body, err := encodeMarker(m)
	if err != nil {
		return fmt.Errorf("statedir: write position hint: %w", err)
	}
	if err := store.WriteFile(d.HintPath(), body); err != nil {
		return fmt.Errorf("statedir: write position hint: %w", err)
	}
	return nil
}

// Hint reads the position hint: ok false with no error if there is none.
func (d *Dir) Hint() (m Marker, ok bool, err error) {
	if err := d.checkOpen(); err != nil {
		return Marker{}, false, fmt.Errorf("statedir: read position hint: %w", err)
	}
	m, err = store.Decode(d.HintPath(), ParseMarker)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return Marker{}, false, nil
	case err != nil && !errors.Is(err, store.ErrUsedPrevious):
		return Marker{}, false, fmt.Errorf("statedir: read position hint: %w", err)
	}
	return m, true, nil
}

// SweepsDir is the directory, inside the state directory, where the recordings of the tunes'
// readings are kept (controller/sweeps).
const SweepsDir = "sweeps"

// SweepsPath is the sweep recordings' directory.
func (d *Dir) SweepsPath() string { return filepath.Join(d.path, SweepsDir) }
