package sweeps

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"sync"
	"sync/atomic"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/store"
	"github.com/tankd/tankd/controller/tune"
)

// Retention defaults. A recording takes about 60 bytes a reading and half a kilobyte of header:
// a tune that finds the dip near where the memory map expects it takes 60 to 100 readings on
// the controller's test loop (4 to 6 KB); one that has to scan a wide window, or a slower
// converter, takes thousands (100 KB and more). 200 recordings are a few days of operating for
// a station that tunes a few dozen times a day: enough to look into a tune that went wrong
// after the fact, which is what they are kept for. 20 MiB holds those 200 even if they are all
// wide scans, is under 1 % of the smallest SD card a small board boots from, and is read once
// at Open (a second or two on a slow board at worst). As every recording is written once and
// never rewritten, the card's wear is the data itself.
const (
	DefaultMaxCount = 200
	DefaultMaxBytes = 20 << 20
)

// SubscriptionDepth is the depth to Subscribe with for Run. Run writes a recording (with an
// fsync, which can stall for a good part of a second on a slow SD card) while the next
// operation's events keep coming; 4096 events are several seconds of a scan's readings (one per
// converter reading, a couple of milliseconds each, plus 20 snapshots a second), so the writer
// does not lose events to its own writes.
const SubscriptionDepth = 4096

// ErrNotFound: no recording has the ID, or it has been dropped to keep within the limits. It
// wraps fs.ErrNotExist.
var ErrNotFound = fmt.Errorf("no such recording: %w", fs.ErrNotExist)

// Options configure a Store. Zero values take the defaults given.
type Options struct {
	// MaxCount is the most recordings kept; default DefaultMaxCount.
	MaxCount int
	// MaxBytes is the most bytes the recordings may take together; default DefaultMaxBytes. A
	// recording larger than this on its own is not written.
	MaxBytes int64
	// Meta is metadata written into every recording besides the store's own (for example
	// loop="garden loop"); keys follow controller/record's rules and may not be the store's.
	Meta   map[string]string
	Logger *slog.Logger
}

func (o *Options) defaults() {
	if o.MaxCount == 0 {
		o.MaxCount = DefaultMaxCount
	}
	if o.MaxBytes == 0 {
		o.MaxBytes = DefaultMaxBytes
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
}

func (o Options) validate() error {
	var errs []error
	if o.MaxCount < 1 || o.MaxCount > 1_000_000 {
		errs = append(errs, fmt.Errorf("max count %d: want 1 to 1000000 recordings", o.MaxCount))
	}
	if o.MaxBytes < 1 {
		errs = append(errs, fmt.Errorf("max bytes %d: want 1 or more", o.MaxBytes))
	}
	for _, k := range ownKeys {
		if _, ok := o.Meta[k]; ok {
			errs = append(errs, fmt.Errorf("meta key %q: the store writes it itself", k))
		}
	}
	if _, err := record.NewWriter(io.Discard, record.Header{Start: time.Unix(0, 0), Meta: o.Meta}); err != nil {
		errs = append(errs, fmt.Errorf("meta: %w", err))
	}
	return errors.Join(errs...)
}

// Info describes one recording.
type Info struct {
	ID   string
	Time time.Time // when the operation started, which sample times count from; UTC
	// Request is the request's ID in the run of the daemon that made the recording (IDs count
	// from 1 again after a restart).
	Request controller.RequestID
	Kind    controller.Kind
	Outcome tune.Outcome
	Freq    physic.Frequency
	Samples int
	Size    int64 // bytes
}

// entry is a file of ours in the directory.
type entry struct {
	id   id
	info Info
	size int64
	// damaged: named as ours but not a readable recording; kept out of List, counted against
	// the limits, dropped in its turn.
	damaged bool
}

// Store is a directory of sweep recordings. Create it with Open; List and Open may be called
// from any goroutine, Run from one.
type Store struct {
	dir string
	o   Options
	log *slog.Logger

	mu      sync.Mutex
	entries []entry // oldest first
	total   int64

	running atomic.Bool

	// consumed on Run's goroutine only
	lastSeq uint64
	cur     *operation

	// test hooks, set before Run
	onEvent func(controller.Event)
	onWrite func(Info)
}

// Open opens (creating it if need be) the directory dir of recordings, indexes what is there,
// removes temporary files that a write killed midway left behind, and drops the oldest
// recordings beyond the limits. A file whose name is not a recording's is left alone and not
// counted; one named as a recording that cannot be read is logged, not listed, and counted
// against the limits (it goes when its turn comes).
func Open(dir string, o Options) (*Store, error) {
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("sweeps: options: %w", err)
	}
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return nil, fmt.Errorf("sweeps: open %s: %w", dir, err)
	}
	s := &Store{dir: dir, o: o, log: o.Logger.With("component", "sweeps")}
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("sweeps: open %s: %w", dir, err)
	}
	for _, de := range ents {
		kind, i := classify(de.Name())
		if kind == foreignName || !de.Type().IsRegular() {
			continue
		}
		path := filepath.Join(dir, de.Name())
		if kind == tempName {
			if err := os.Remove(path); err != nil && !errors.Is(err, fs.ErrNotExist) {
				s.log.Warn("could not remove a temporary file left by an interrupted write", "file", path, "err", err)
			}
			continue
		}
		e, err := s.index(path, i)
		if err != nil {
			s.log.Warn("a file named as a recording is damaged: not listed, dropped in its turn", "file", path, "err", err)
		}
		s.entries = append(s.entries, e)
		s.total += e.size
	}
	slices.SortFunc(s.entries, func(a, b entry) int { return a.id.compare(b.id) })
	s.mu.Lock()
	s.trimLocked()
	s.mu.Unlock()
	return s, nil
}

// index reads the recording at path. On an error the entry is marked damaged, with its size.
func (s *Store) index(path string, i id) (entry, error) {
	e := entry{id: i, damaged: true}
	f, err := os.Open(path)
	if err != nil {
		return e, err
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return e, err
	}
	e.size = fi.Size()
	if e.size > s.o.MaxBytes {
		return e, fmt.Errorf("%d bytes, more than the store's limit of %d", e.size, s.o.MaxBytes)
	}
	h, samples, err := record.ReadAll(f)
	if err != nil {
		return e, err
	}
	e.info = infoOf(i, h, len(samples), e.size)
	if n, ok := h.Meta[keySamples]; ok && n != strconv.Itoa(len(samples)) {
		return e, fmt.Errorf("%d samples, the header says %s", len(samples), n)
	}
	e.damaged = false
	return e, nil
}

// infoOf describes a recording from its header.
func infoOf(i id, h record.Header, samples int, size int64) Info {
	info := Info{ID: i.String(), Time: h.Start.UTC(), Kind: controller.Kind(h.Meta[keyKind]),
		Outcome: tune.Outcome(h.Meta[keyOutcome]), Samples: samples, Size: size}
	if n, err := strconv.ParseUint(h.Meta[keyRequest], 10, 64); err == nil {
		info.Request = controller.RequestID(n)
	}
	if f, ok := parseFrequency(h.Meta[keyFreq]); ok {
		info.Freq = f
	}
	return info
}

// List describes the recordings, newest first. It reads no files.
func (s *Store) List() []Info {
	s.mu.Lock()
	defer s.mu.Unlock()
	out := make([]Info, 0, len(s.entries))
	for i := len(s.entries) - 1; i >= 0; i-- {
		if e := s.entries[i]; !e.damaged {
			out = append(out, e.info)
		}
	}
	return out
}

// Open opens the recording named id for reading; the caller must Close it. It refuses text
// that is not an ID (ErrInvalidID) and looks in no other place than the store's directory; an ID
// the store does not hold, or no longer holds, is ErrNotFound. A recording dropped while it is
// being read is read to its end all the same.
func (s *Store) Open(idText string) (Info, io.ReadCloser, error) {
	i, err := parseID(idText)
	if err != nil {
		return Info{}, nil, fmt.Errorf("sweeps: open: %w", err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	k, found := slices.BinarySearchFunc(s.entries, i, func(e entry, t id) int { return e.id.compare(t) })
	if !found || s.entries[k].damaged {
		return Info{}, nil, fmt.Errorf("sweeps: open %s: %w", idText, ErrNotFound)
	}
	// Under mu, so that the file cannot be dropped between the look-up and the open: once
	// open, its data stays readable after it is unlinked.
	f, err := os.Open(filepath.Join(s.dir, i.fileName()))
	if errors.Is(err, fs.ErrNotExist) {
		return Info{}, nil, fmt.Errorf("sweeps: open %s: %w", idText, ErrNotFound)
	}
	if err != nil {
		return Info{}, nil, fmt.Errorf("sweeps: open %s: %w", idText, err)
	}
	return s.entries[k].info, f, nil
}

// trimLocked drops the oldest recordings until the rest are within the limits; the caller
// holds mu.
func (s *Store) trimLocked() {
	n := 0
	for len(s.entries)-n > s.o.MaxCount || (s.total > s.o.MaxBytes && n < len(s.entries)) {
		e := s.entries[n]
		n++
		s.total -= e.size
		path := filepath.Join(s.dir, e.id.fileName())
		if err := os.Remove(path); err != nil && !errors.Is(err, fs.ErrNotExist) {
			// It stays on the disk, not in the index: the next Open tries again.
			s.log.Error("could not drop a recording", "file", path, "err", err)
			continue
		}
		s.log.Debug("recording dropped to keep within the limits", "id", e.id.String(), "bytes", e.size,
			"count", s.o.MaxCount, "max_bytes", s.o.MaxBytes)
	}
	if n == 0 {
		return
	}
	s.entries = slices.Delete(s.entries, 0, n)
	if err := store.SyncDir(s.dir); err != nil {
		s.log.Warn("could not sync the directory after dropping recordings", "dir", s.dir, "err", err)
	}
}
