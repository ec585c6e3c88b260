// Package record reads and writes sweep recordings: what the directional coupler saw while the
// motor stepped the loop's capacitor through a range with a carrier on.
//
// The simulator writes recordings, and the daemon writes them from real hardware, so that a sweep
// seen at the antenna can be studied and replayed on a desk (see sim/replay). The package is pure:
// it parses and formats text and touches no hardware. The caller owns the io.Reader or io.Writer,
// must call Writer.Flush when done writing, and must close the file itself.
//
// # The file format, version 1
//
// A recording is UTF-8 text, one item per line. An example:
//
//	tankd-sweep 1
//	# 80 m dip, coarse pass up then down
//	@ start=2026-01-01T00:00:00Z
//	@ loop="garden loop, two turns"
//	@ seed=42
//	@ source=tanksim
//	t_s step dir freq_hz fwd_w ref_w swr
//	0.001160 40210 + 3750000 4.9812 0.0021 1.0435718
//	0.002320 40211 + 3750000 4.9809 0.0019 1.0413037
//
// General rules:
//
//   - Lines end with LF or CRLF. Trailing spaces and tabs are ignored, as is a UTF-8 byte-order
//     mark before the first line. Fields are separated by one or more spaces or tabs.
//   - The first line is the signature "tankd-sweep" followed by the format version, a decimal
//     integer. This package reads and writes version 1 only and rejects any other version with an
//     error wrapping ErrVersion.
//   - After the first line, blank lines and lines whose first non-blank character is '#' are
//     comments and may appear anywhere. A '#' inside any other line is data, not a comment.
//
// Metadata lines follow the signature and start with '@'; each holds one or more key=value pairs,
// separated by blanks. A key starts with an ASCII letter and continues with ASCII letters, digits,
// '_', '.' or '-'; keys are case-sensitive and each may appear once per file. A value is either a
// bare word (at least one character, no blanks, no '"') or a double-quoted string with Go's escape
// sequences (\" \\ \n \t \xFF \u00e9 ...); an empty value is written "". One key is required:
//
//   - start: the instant the recording's clock started, in RFC 3339 with optional fractional
//     seconds (2026-01-01T00:00:00.25+01:00). Sample times count from it.
//
// Every other key is free text for people and tools. Keys in common use are source (what made the
// recording: the simulator, or the daemon on hardware), seed (the simulator's random seed) and
// loop (which antenna). Units need no metadata: they are part of the column names.
//
// The column line ends the metadata. It lists exactly these seven names in this order:
//
//	t_s step dir freq_hz fwd_w ref_w swr
//
// Every following non-comment line is one sample with exactly seven fields, in that order:
//
//   - t_s: seconds since start, an unsigned decimal (digits, optionally a point and more digits;
//     no sign, no exponent). Resolution 1 ns; further decimals are rounded half up. Times never
//     decrease down the file.
//   - step: the motor position in microsteps, a decimal integer with an optional sign.
//   - dir: the direction of the most recent travel, '+' (step count rising) or '-' (falling).
//     Gear play makes a sweep going up disagree with one going down, so the direction matters
//     even for a sample taken with the motor at rest.
//   - freq_hz: the operating frequency in hertz, an unsigned decimal; resolution 1 µHz.
//   - fwd_w, ref_w: forward and reflected power in watts, unsigned decimals; resolution 1 nW.
//   - swr: the standing-wave ratio as the recorder computed it: a decimal floating-point
//     number of at least 1 (an exponent is allowed: 1.5e3), "inf" at total reflection, or "nan"
//     when there was no forward power to compare with. Its value is kept as recorded; it is not
//     recomputed from the powers, which may have been calibrated differently.
//
// A file may end after the column line: a recording with no samples is valid. A file that ends
// before the column line is not.
//
// The Writer writes start first and the other keys one per line in byte order of the key, t_s
// with six to nine decimals, powers with at least four decimals (0.1 mW), whole frequencies
// without decimals, and the SWR with the fewest digits that read back as the same float64, so
// that reading what the Writer wrote gives back exactly the samples it was given.
//
// Readers of version 1 reject anything this description does not allow, with an error that
// names the line. A later version that adds columns or keys will change the version number.
package record
