package controller

import (
	"context"
	"errors"
	"fmt"
	"log/slog"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
)

// AssembleOptions say how to assemble a controller beyond what the station description says.
type AssembleOptions struct {
	// Tune is the tuning policy: whether to key (Transmit), the tune power and its limit, the
	// target SWR, the carrier-time cap and so on. What the description decides (the home
	// switch, hard stops, the nominal play) is filled in from it.
	Tune tune.Options
	// Nominal is the gear play assumed until a calibration measures it; 0: the description's
	// nominal bound (station.Description.NominalBacklash).
	Nominal motion.Steps
	// StateDir, if set, is where the memory map, the calibration and the position hint are
	// loaded from and saved to (see LoadState); nil: they live in memory only.
	StateDir *statedir.Dir
	// Service, if set, assembles a Service around the tuner, with these options (their State
	// is filled in from StateDir); nil: no service, and the caller drives the tuner itself, on
	// one goroutine (the benchmark, tanksim).
	Service *Options
	// Observer watches the tuner synchronously; only without a Service (a service's listeners
	// Subscribe).
	Observer tune.Observer
	// Place, if set, says where the motor is, once the axis and the state are ready and before
	// the tuner and the service are built (so that their first snapshot says it): Reference the
	// axis (after a clean stop), or leave it untrusted with the reason (Distrust). st is nil
	// without a state directory.
	Place func(ax *motion.Axis, st *State)
	// AdjustAxis and AdjustMap, if set, change the axis's and the memory map's options after
	// they are derived from the description: for a rig whose motor positions are not a real
	// station's (a recording's span as the soft limits) or whose map is to know less (no
	// prior). A daemon leaves them nil.
	AdjustAxis func(*motion.Options)
	AdjustMap  func(*memmap.Options)
	Logger     *slog.Logger
}

// Assembly is a controller assembled on a station's resources.
type Assembly struct {
	Station   station.Description
	Resources Resources
	Axis      *motion.Axis
	Map       *memmap.Map
	State     *State // nil without a state directory
	Tuner     *tune.Tuner
	Service   *Service // nil unless asked for
}

// Assemble builds the axis (enabled, its position not yet trusted), the memory map with the
// description's physics prior (loaded from the state directory, if one is given, with the
// stored calibration), the tuner and, if asked, the service, from a station description and the
// resources a backend resolved. It is the one place that turns a description into a running
// controller: the daemon, the benchmark, replay and tanksim all assemble this way.
//
// The caller then says where the motor is (Axis.Reference after a clean stop, or leaves the
// axis untrusted for homing or re-referencing) and, with a service, runs it.
func Assemble(ctx context.Context, desc station.Description, res Resources, o AssembleOptions) (*Assembly, error) {
	if err := desc.Validate(); err != nil {
		return nil, fmt.Errorf("assemble: station: %w", err)
	}
	if err := res.validate(); err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	if o.Service != nil && o.Observer != nil {
		return nil, errors.New("assemble: an observer with a service: subscribe to the service instead")
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	nominal := o.Nominal
	if nominal == 0 {
		nominal = desc.NominalBacklash()
	}
	axOpts := desc.AxisOptions(nominal)
	axOpts.Logger = o.Logger
	if o.AdjustAxis != nil {
		o.AdjustAxis(&axOpts)
	}
	ax, err := motion.NewAxis(res.Drive, res.Clock, res.Switches, axOpts)
	if err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	if err := ax.Enable(ctx); err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	mo, err := desc.MapOptions()
	if err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	if o.AdjustMap != nil {
		o.AdjustMap(&mo)
	}
	a := &Assembly{Station: desc, Resources: res, Axis: ax}
	if o.StateDir != nil {
		if a.State, err = LoadState(o.StateDir, StateOptions{Map: mo, Clock: res.Clock, Logger: o.Logger}); err != nil {
			return nil, fmt.Errorf("assemble: %w", err)
		}
		a.Map = a.State.Map()
	} else if a.Map, err = memmap.New(mo); err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	if o.Place != nil {
		o.Place(ax, a.State)
	}
	to := desc.TunerOptions(o.Tune, nominal)
	if to.Logger == nil {
		to.Logger = o.Logger
	}
	deps := tune.Deps{Axis: ax, Sensor: res.Sensor, Clock: res.Clock, Map: a.Map,
		Transmitter: res.Transmitter, Thermometer: res.Thermometer, Frequency: res.Frequency}
	if o.Service == nil {
		deps.Observer = o.Observer
		if a.Tuner, err = tune.New(deps, to); err != nil {
			return nil, fmt.Errorf("assemble: %w", err)
		}
		if a.State != nil {
			if c, ok := a.State.Calibration(); ok {
				a.Tuner.UseBacklash(c.Backlash)
			}
		}
		return a, nil
	}
	so := *o.Service
	so.State = a.State
	if so.Logger == nil {
		so.Logger = o.Logger
	}
	if a.Service, err = NewService(deps, to, so); err != nil {
		return nil, fmt.Errorf("assemble: %w", err)
	}
	a.Tuner = a.Service.Tuner()
	return a, nil
}
