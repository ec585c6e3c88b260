package radio

import (
	"context"
	"errors"
	"fmt"
	"io"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/drivers/cat/wire"
)

// DefaultBinaryAddr is the simulated radio's bus address unless told otherwise.
const DefaultBinaryAddr byte = 0x94

// BinaryOpts configure ServeBinary. Zero fields take the documented defaults.
type BinaryOpts struct {
	// Addr is the radio's bus address. Default DefaultBinaryAddr. The broadcast address, the
	// controllers' 0xE0 and the framing bytes 0xFC to 0xFF are refused.
	Addr byte
	// NoEcho turns off the bus echo. By default every byte the controller sends comes back to
	// it, as on the single shared wire of the real bus (the echo is the wire's, so it goes on
	// while the radio is switched off).
	NoEcho bool
	// NoTransceive turns off the broadcasts of frequency and mode changes that the radio
	// sends by default.
	NoTransceive bool
	// Faults are the seeded misbehaviours. Default none.
	Faults Faults
	// Clock times delayed replies. Default clock.Wall.
	Clock clock.Clock
}

func (o BinaryOpts) resolve() (BinaryOpts, error) {
	if o.Addr == 0 {
		o.Addr = DefaultBinaryAddr
	}
	var errs []error
	if o.Addr == wire.AddrController || o.Addr >= 0xFC {
		errs = append(errs, fmt.Errorf("Addr: %#02x, want 0x01 to 0xfb but not 0xe0", o.Addr))
	}
	var err error
	if o.Faults, err = o.Faults.resolve(); err != nil {
		errs = append(errs, err)
	}
	if err := errors.Join(errs...); err != nil {
		return o, fmt.Errorf("binary cat options: %w", err)
	}
	return o, nil
}

// binaryMode is the binary dialect's mode byte for m.
func binaryMode(m Mode) wire.BinaryMode {
	switch m {
	case LSB:
		return wire.BinLSB
	case USB:
		return wire.BinUSB
	case CW:
		return wire.BinCW
	case CWReverse:
		return wire.BinCWR
	case AM:
		return wire.BinAM
	case FM:
		return wire.BinFM
	case Data:
		return wire.BinRTTY
	case DataReverse:
		return wire.BinRTTYR
	}
	return 0
}

func modeFromBinary(c wire.BinaryMode) (Mode, bool) {
	for m := LSB; m <= DataReverse; m++ {
		if binaryMode(m) == c {
			return m, true
		}
	}
	return 0, false
}

// The radio reports filter 1 and ignores the filter of a set-mode command: it has no filters.
const binaryFilter = 1

// ServeBinary answers the binary CAT dialect on link until ctx ends (it returns ctx's error), the
// link closes (nil) or the link fails. It answers frames addressed to its own address, to
// whichever address sent them; set commands are acknowledged with OK or refused with NG. In
// transceive mode (the default) it broadcasts the operating frequency and mode when anybody but
// this session changes them. The power level 0 to 255 maps linearly onto 0 to the radio's
// MaxPower. A radio that is switched off answers nothing.
//
// Goroutine ownership and the handling of a blocked link are as for ServeASCII.
func (r *Radio) ServeBinary(ctx context.Context, link io.ReadWriter, o BinaryOpts) error {
	o, err := o.resolve()
	if err != nil {
		return err
	}
	b := &binarySession{session: r.newSession(link, o.Clock, o.Faults), o: o}
	return b.serve(ctx, dialect{
		name:   "binary",
		split:  wire.SplitBinary,
		echo:   !o.NoEcho,
		handle: b.handle,
		notify: b.notify,
	})
}

type binarySession struct {
	*session
	o   BinaryOpts
	out []byte
}

func (b *binarySession) sendMsg(ctx context.Context, m wire.BinaryMsg) error {
	m.From = b.o.Addr
	out, err := wire.AppendBinary(b.out[:0], m)
	if err != nil {
		out, _ = wire.AppendBinary(b.out[:0], wire.BinaryMsg{To: m.To, From: m.From, Cmd: wire.BinNG})
	}
	b.out = out
	return b.send(ctx, out)
}

func (b *binarySession) handle(ctx context.Context, frame []byte) error {
	st := b.r.State()
	if !st.On {
		return nil
	}
	f, err := wire.ParseBinaryFrame(frame)
	if err != nil || f.To != b.o.Addr || f.From == b.o.Addr {
		return nil // not for us, or our own frame seen on the bus
	}
	reply := func(m wire.BinaryMsg) error {
		m.To = f.From
		return b.sendMsg(ctx, m)
	}
	ack := func(err error) error {
		if err != nil {
			return reply(wire.BinaryMsg{Cmd: wire.BinNG})
		}
		return reply(wire.BinaryMsg{Cmd: wire.BinOK})
	}
	m, err := wire.DecodeBinary(f)
	if err != nil {
		return ack(err)
	}
	switch m.Cmd {
	case wire.BinReadFreq:
		if m.Query {
			return reply(wire.BinaryMsg{Cmd: wire.BinReadFreq, Freq: st.Frequency()})
		}
	case wire.BinSetFreq:
		return ack(b.r.setFrequency(b.origin, nil, m.Freq))
	case wire.BinReadMode:
		if m.Query {
			return reply(wire.BinaryMsg{Cmd: wire.BinReadMode, Mode: binaryMode(st.Mode), Filter: binaryFilter})
		}
	case wire.BinSetMode:
		mode, ok := modeFromBinary(m.Mode)
		if !ok {
			return ack(ErrMode)
		}
		return ack(b.r.setMode(b.origin, mode))
	case wire.BinSelectVFO:
		return ack(b.r.selectVFO(b.origin, VFO(m.VFO)))
	case wire.BinPower:
		if m.Query {
			return reply(wire.BinaryMsg{Cmd: wire.BinPower, Level: b.level(st.Power)})
		}
		return ack(b.r.setPower(b.origin, b.power(m.Level)))
	case wire.BinPTT:
		if m.Query {
			return reply(wire.BinaryMsg{Cmd: wire.BinPTT, TX: st.TX})
		}
		return ack(b.r.ptt(b.origin, m.TX))
	case wire.BinID:
		if m.Query {
			return reply(wire.BinaryMsg{Cmd: wire.BinID, Addr: b.o.Addr})
		}
	case wire.BinTransceiveFreq, wire.BinTransceiveMode, wire.BinOK, wire.BinNG:
		return nil // reports and acknowledgements are not commands
	}
	// An answer-shaped frame sent to the radio: not a command it takes.
	return ack(wire.ErrUnknown)
}

// level converts a power setting to the 0–255 scale of the radio's maximum, rounded.
func (b *binarySession) level(p physic.Power) uint8 {
	full := int64(b.r.o.MaxPower)
	return uint8((int64(p)*wire.MaxLevel + full/2) / full)
}

// power converts a 0–255 level to a power setting, rounded to the nanowatt.
func (b *binarySession) power(level uint8) physic.Power {
	full := int64(b.r.o.MaxPower)
	return physic.Power((full*int64(level) + wire.MaxLevel/2) / wire.MaxLevel)
}

func (b *binarySession) notify(ctx context.Context, ev Event) error {
	if b.o.NoTransceive {
		return nil
	}
	st, c := ev.State, ev.Changed
	active := ChangedFreqA
	if st.VFO == VFOB {
		active = ChangedFreqB
	}
	if c.Has(active) || c.Has(ChangedVFO) {
		m := wire.BinaryMsg{To: wire.AddrBroadcast, Cmd: wire.BinTransceiveFreq, Freq: st.Frequency()}
		if err := b.sendMsg(ctx, m); err != nil {
			return err
		}
	}
	if c.Has(ChangedMode) {
		m := wire.BinaryMsg{To: wire.AddrBroadcast, Cmd: wire.BinTransceiveMode, Mode: binaryMode(st.Mode), Filter: binaryFilter}
		if err := b.sendMsg(ctx, m); err != nil {
			return err
		}
	}
	return nil
}
