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

// DefaultASCIIID is the model number the simulated radio answers to "ID;" unless told
// otherwise: an arbitrary number, not meant to match any real radio.
const DefaultASCIIID = 900

// ASCIIOpts configure ServeASCII. Zero fields take the documented defaults.
type ASCIIOpts struct {
	// Wire sets the dialect's field widths. Default 11 frequency digits, 3 ID digits.
	Wire wire.ASCIIOpts
	// ID is the answer to "ID;". Default DefaultASCIIID.
	ID uint16
	// AutoInfo is the auto-information level the session starts with, 0 (off, the default,
	// as radios start) to 3.
	AutoInfo uint8
	// Faults are the seeded misbehaviours. Default none.
	Faults Faults
	// Clock times delayed replies. Default clock.Wall.
	Clock clock.Clock
}

func (o ASCIIOpts) resolve() (ASCIIOpts, error) {
	if o.ID == 0 {
		o.ID = DefaultASCIIID
	}
	var errs []error
	if err := o.Wire.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("Wire: %w", err))
	}
	idDigits := o.Wire.IDDigits
	if idDigits == 0 {
		idDigits = 3
	}
	if limit := pow10(idDigits); uint64(o.ID) >= limit {
		errs = append(errs, fmt.Errorf("ID: %d, want below %d", o.ID, limit))
	}
	if o.AutoInfo > 3 {
		errs = append(errs, fmt.Errorf("AutoInfo: %d, want 0 to 3", o.AutoInfo))
	}
	var err error
	if o.Faults, err = o.Faults.resolve(); err != nil {
		errs = append(errs, err)
	}
	if err := errors.Join(errs...); err != nil {
		return o, fmt.Errorf("ascii cat options: %w", err)
	}
	return o, nil
}

func pow10(n int) uint64 {
	p := uint64(1)
	for range n {
		p *= 10
	}
	return p
}

// asciiMode is the ASCII dialect's code for m.
func asciiMode(m Mode) wire.ASCIIMode {
	switch m {
	case LSB:
		return wire.ASCIILSB
	case USB:
		return wire.ASCIIUSB
	case CW:
		return wire.ASCIICW
	case CWReverse:
		return wire.ASCIICWR
	case AM:
		return wire.ASCIIAM
	case FM:
		return wire.ASCIIFM
	case Data:
		return wire.ASCIIFSK
	case DataReverse:
		return wire.ASCIIFSKR
	}
	return 0
}

func modeFromASCII(c wire.ASCIIMode) (Mode, bool) {
	for m := LSB; m <= DataReverse; m++ {
		if asciiMode(m) == c {
			return m, true
		}
	}
	return 0, false
}

// ServeASCII answers the ASCII CAT dialect on link until ctx ends (it returns ctx's error), the
// link closes (nil) or the link fails. Set commands are carried out silently and anything the
// radio does not understand or refuses is answered "?;". With auto-information on ("AI1;" to
// "AI3;", or ASCIIOpts.AutoInfo), the session reports changes that anybody but itself makes:
// "FA"/"FB" for a VFO's frequency, "MD" for the mode, "PC" for the power setting and the "IF"
// status record for the transmit state or the VFO in use. A radio that is switched off reads
// and ignores everything.
//
// Serve owns a goroutine that reads link and waits for it before returning. If ctx ends while it
// is blocked, ServeASCII sets a deadline in the past on link if it has SetDeadline, or else
// closes it if it is an io.Closer; with neither, ServeASCII returns only once the pending Read
// does. A caller that reuses the link afterwards must clear the deadline.
func (r *Radio) ServeASCII(ctx context.Context, link io.ReadWriter, o ASCIIOpts) error {
	o, err := o.resolve()
	if err != nil {
		return err
	}
	a := &asciiSession{session: r.newSession(link, o.Clock, o.Faults), o: o, autoInfo: o.AutoInfo}
	return a.serve(ctx, dialect{
		name:   "ascii",
		split:  wire.SplitASCII,
		handle: a.handle,
		notify: a.notify,
	})
}

type asciiSession struct {
	*session
	o        ASCIIOpts
	autoInfo uint8 // touched only by the serve loop
	out      []byte
}

func (a *asciiSession) reply(ctx context.Context, m wire.ASCIIMsg) error {
	b, err := wire.AppendASCII(a.out[:0], m, a.o.Wire)
	if err != nil {
		// Only a state the frame cannot carry gets here (a frequency wider than the field);
		// the radio answers as it does to any request it cannot meet.
		b = append(a.out[:0], "?;"...)
	}
	a.out = b
	return a.send(ctx, b)
}

func (a *asciiSession) refuse(ctx context.Context) error {
	return a.reply(ctx, wire.ASCIIMsg{Cmd: wire.CmdError})
}

// refuseIf answers "?;" if the radio refused a set command; a set command that succeeds is
// not answered.
func (a *asciiSession) refuseIf(ctx context.Context, err error) error {
	if err != nil {
		return a.refuse(ctx)
	}
	return nil
}

func asciiVFO(cmd wire.ASCIICmd) VFO {
	if cmd == wire.CmdFreqB {
		return VFOB
	}
	return VFOA
}

func (a *asciiSession) handle(ctx context.Context, frame []byte) error {
	st := a.r.State()
	if !st.On {
		return nil
	}
	m, err := wire.ParseASCII(frame, a.o.Wire)
	if err != nil {
		return a.refuse(ctx)
	}
	switch m.Cmd {
	case wire.CmdFreqA, wire.CmdFreqB:
		v := asciiVFO(m.Cmd)
		if m.Query {
			return a.reply(ctx, a.freqMsg(st, v))
		}
		return a.refuseIf(ctx, a.r.setFrequency(a.origin, &v, m.Freq))
	case wire.CmdMode:
		if m.Query {
			return a.reply(ctx, wire.ASCIIMsg{Cmd: wire.CmdMode, Mode: asciiMode(st.Mode)})
		}
		mode, ok := modeFromASCII(m.Mode)
		if !ok {
			return a.refuse(ctx)
		}
		return a.refuseIf(ctx, a.r.setMode(a.origin, mode))
	case wire.CmdVFO:
		if m.Query {
			return a.reply(ctx, wire.ASCIIMsg{Cmd: wire.CmdVFO, VFO: wire.VFO(st.VFO)})
		}
		return a.refuseIf(ctx, a.r.selectVFO(a.origin, VFO(m.VFO)))
	case wire.CmdTransmit:
		if m.TX == wire.TXTune {
			return a.refuseIf(ctx, a.r.key(a.origin, st.Power))
		}
		return a.refuseIf(ctx, a.r.ptt(a.origin, true))
	case wire.CmdReceive:
		return a.refuseIf(ctx, a.r.ptt(a.origin, false))
	case wire.CmdStatus:
		if !m.Query {
			return a.refuse(ctx)
		}
		return a.reply(ctx, a.statusMsg(st))
	case wire.CmdAutoInfo:
		if m.Query {
			return a.reply(ctx, wire.ASCIIMsg{Cmd: wire.CmdAutoInfo, AutoInfo: a.autoInfo})
		}
		a.autoInfo = m.AutoInfo
		return nil
	case wire.CmdPower:
		if m.Query {
			return a.reply(ctx, powerMsg(st))
		}
		return a.refuseIf(ctx, a.r.setPower(a.origin, m.Power))
	case wire.CmdID:
		if !m.Query {
			return a.refuse(ctx)
		}
		return a.reply(ctx, wire.ASCIIMsg{Cmd: wire.CmdID, ID: a.o.ID})
	case wire.CmdError:
		// A controller echoing our refusal back; answering would start a loop.
		return nil
	}
	return a.refuse(ctx)
}

func (a *asciiSession) freqMsg(st State, v VFO) wire.ASCIIMsg {
	m := wire.ASCIIMsg{Cmd: wire.CmdFreqA, Freq: st.FreqA}
	if v == VFOB {
		m = wire.ASCIIMsg{Cmd: wire.CmdFreqB, Freq: st.FreqB}
	}
	return m
}

// powerMsg reports the power setting in the dialect's whole watts, rounded.
func powerMsg(st State) wire.ASCIIMsg {
	w := (st.Power + physic.Watt/2) / physic.Watt * physic.Watt
	return wire.ASCIIMsg{Cmd: wire.CmdPower, Power: w}
}

func (a *asciiSession) statusMsg(st State) wire.ASCIIMsg {
	return wire.ASCIIMsg{Cmd: wire.CmdStatus, Status: wire.Status{
		Freq: st.Frequency(),
		TX:   st.TX,
		Mode: asciiMode(st.Mode),
		VFO:  wire.VFO(st.VFO),
	}}
}

func (a *asciiSession) notify(ctx context.Context, ev Event) error {
	if a.autoInfo == 0 {
		return nil
	}
	st, c := ev.State, ev.Changed
	var msgs []wire.ASCIIMsg
	if c.Has(ChangedFreqA) {
		msgs = append(msgs, a.freqMsg(st, VFOA))
	}
	if c.Has(ChangedFreqB) {
		msgs = append(msgs, a.freqMsg(st, VFOB))
	}
	if c.Has(ChangedMode) {
		msgs = append(msgs, wire.ASCIIMsg{Cmd: wire.CmdMode, Mode: asciiMode(st.Mode)})
	}
	if c.Has(ChangedPower) {
		msgs = append(msgs, powerMsg(st))
	}
	if c.Has(ChangedTX) || c.Has(ChangedVFO) {
		msgs = append(msgs, a.statusMsg(st))
	}
	for _, m := range msgs {
		if err := a.reply(ctx, m); err != nil {
			return err
		}
	}
	return nil
}
