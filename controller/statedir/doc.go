// Package statedir is the daemon's state directory: the one place its files live, a lock that
// keeps a second daemon (or a second copy of the same one) out of it, and a clean-stop marker
// that tells a start after a clean stop from one after a crash.
//
// # Files
//
// MapFile holds the memory map, CalibrationFile the backlash calibration, MarkerFile the
// clean-stop marker and LockFile the lock; Dir's methods name their paths. The map, the
// calibration and the marker are written with controller/store, which keeps a previous copy
// and temporary files beside each (see its doc).
//
// # The lock
//
// Open takes an exclusive flock(2) on LockFile without waiting, and writes its process ID into
// the file for the error a second Open gets: ErrLocked, naming the holder. The kernel releases
// the lock when the holder exits, however it exits, so a crashed daemon never leaves the
// directory locked; the PID left in the file is then only a stale note, overwritten by the next
// holder. A flock is held by an open file, so a second Open in the same process is refused too.
// The lock is what makes controller/store's rule of one writer per file hold for the files in
// the directory. It is advisory, and dependable only on a local filesystem: not on NFS, where
// Linux emulates flock with POSIX record locks, which one process can take twice. Locking needs flock, on
// Linux and the other unix systems that have it; elsewhere Open fails with an error wrapping
// errors.ErrUnsupported.
//
// # The clean-stop marker
//
// A motor position kept in memory is only worth trusting when the daemon stopped the motor and
// saw it stand before it exited. WriteMarker records that it did, and where the motor stood;
// TakeMarker, at the next start, reads the record and removes it, so that a crash later in that
// run is never taken for a clean stop. The marker is a small text file, checksummed by
// controller/store:
//
//	tankd-clean-stop 1
//	position=-1234 trusted=true at=2026-01-02T15:04:05.123456789Z
//	reason="SIGTERM"                      (only when there is a reason)
//	sha256 <64 hex digits>                (added by controller/store)
//
// position is the motor's position in microsteps (motion.Steps), trusted whether the daemon
// itself trusted it (the axis was referenced and had not faulted), at when the daemon stopped,
// in RFC 3339 and UTC, and reason a Go-quoted string, at most MaxReasonLen bytes.
//
// # What the caller must do
//
//   - Open the directory first, before reading or writing any file in it, and keep it open for
//     the life of the process (with Options.MustExist where systemd or a mount provides it). Treat an error wrapping ErrLocked as fatal, and show it: it names
//     the process that holds the directory.
//   - Call TakeMarker once at start, before trusting any stored motor position. Only ok=true
//     says the last run stopped cleanly; then Marker.Position is where the motor stands if
//     Marker.Trusted is true. Absent (ok=false and no error) means a first run or a crash; an
//     error means a marker was there but could not be used (damaged, of another version) or
//     could not be removed, and counts as a crash too: log it, and find the position again
//     (home, or re-reference) as after a crash.
//   - On a clean exit, stop the motor and wait for it to stand, save the map and the
//     calibration, and call WriteMarker last, with the position the axis reports and Trusted
//     false if the axis had faulted or was never referenced. Nothing may move the motor after
//     it. On an exit that is not clean (a fault that leaves the motor moving or unknown, a
//     failed stop), write no marker: the next start then treats it as a crash.
//   - Close the directory last. Close only releases the lock; the process's exit would too.
//
// A Dir is used by one goroutine, the daemon's main one.
//
// # What is not covered
//
// The marker says where the motor stood when the daemon stopped. A shaft turned by hand, or a
// coupling that slipped, while the daemon was down is not seen; homing, where there is a
// switch, is the remedy for a loop that may be touched between runs.
package statedir
