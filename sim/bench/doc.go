// Package bench runs the real controller against the simulator: a Rig wires controller/motion,
// controller/memmap and controller/tune to a sim.Station exactly as a real installation wires
// them to hardware, configured from a station.Description (which may differ from the simulated
// truth, a sim.Spec, as real loops differ from their drawings). On it are built the benchmark
// (Run: seeded scenarios drawn from the presets or the caller's stations, tankd against an
// exhaustive sweep and an oracle that knows the answer), sweep recordings (RecordSweep) and
// their replay (ReplayRig), and the scripted tests of the tuner (testdata/tune), its safety
// properties and its behaviour under scheduling jitter.
//
// What the caller must do: give NewRig the truth and, where it should differ, the description;
// run the rig from one goroutine (its clock is virtual unless RealTime is set, and a virtual
// clock advances only when someone sleeps); use Rig.Reference, not the axis's own, where a
// test declares the position, so that the rig's soft-limit watch keeps its frame. Run reports
// the same figures for the same Options whatever the parallelism: every draw is seeded.
package bench
