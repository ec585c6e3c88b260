// Package replay plays a sweep recording back as if it were the loop, so that the real
// controller can be run on a desk against a sweep seen at the antenna (or in the simulator).
//
// A Replay is both the motor drive (motion.Drive) and the coupler (sense.Sensor). The drive
// emits each move's pulses on the move's Profile schedule on the injected clock, and keeps the
// motor position by counting them. A Read waits one conversion time on the clock and answers the
// forward and reflected power that the recording shows at the motor position in the middle of
// that conversion (the instant sense.Reading.At stands for).
//
// The answer comes from the samples recorded at one frequency (Options.Freq) while travelling in
// the direction of the replay's most recent pulse, because gear play makes a sweep going up see
// the dip at other motor steps than one going down. Between two recorded steps it interpolates
// forward power and |Γ|² linearly; SWR is derived from them, never interpolated, since it is far
// from linear near the dip. Several samples at one step and direction are averaged; samples
// without forward power are ignored, as they say nothing about the match. Outside the recorded
// span, or for a direction never recorded, Read fails with ErrNoData, unless Options.Fallback
// lets it use the other direction's samples shifted by Options.Backlash.
//
// What the caller must do: read the recording with controller/record, give New the clock the
// controller runs on, and treat the recording's step numbers as motor positions (reference the
// axis to Options.Position). Enable the drive before moving, as with real hardware, and Halt it
// on the way out.
//
// Every reading carries fresh noise, seeded (Options.Seed), of the size the recording's own
// scatter shows: EstimateNoise measures it per channel, from samples repeated at a step and
// from each step's departure from its neighbours along a sweep, as a relative scatter (σ of
// ln P); Replay.Noise tells the estimate. Without it a replay would answer the same reading
// every time at a position, and a controller would measure a fraction of the noise the
// recording was made with and trust its readings too much. Options.Silent replays the averaged
// curve as it is.
//
// A replay is only as good as its recording: its noise is relative (as a log detector's,
// constant in dB), so behind a square-law detector, whose noise is constant in volts and grows
// relative to a small reading, readings near the dip replay smoother than they were recorded;
// it does not model the deadband itself (a reversal switches to the other direction's samples
// at the first pulse, whereas a real shaft stands still until the play is taken up), and it
// knows nothing between the recorded steps beyond a straight line.
package replay
