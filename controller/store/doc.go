// Package store keeps small state files (the memory map, calibrations) so that a crash, a
// SIGKILL or a torn write never leaves the daemon without its last good state, and never hands
// it damaged data as if it were good.
//
// # Format
//
// A file is its body, as the caller gave it, followed by one checksum line:
//
//	<body: zero or more lines, each ending in LF>
//	sha256 <64 lower-case hex digits>
//
// The digest is the SHA-256 of every byte before the checksum line. The body is the caller's
// business (its own signature and version, if it wants them); the framing is the same for every
// file and every version of one, so that a damaged file is always told from one of a format
// this build does not know. `head -n -1 FILE | sha256sum` checks a file by hand.
//
// # Guarantees
//
//   - Atomic replacement. WriteFile writes a temporary file in the same directory, syncs it,
//     and renames it over the path, so at every moment the path names either the complete old
//     file or the complete new one, whatever instant the process is killed at.
//   - Durability on success. The new data is synced before the rename and the directory after
//     it: once WriteFile returns nil, the new file (and the previous copy) are on the device.
//   - A previous good copy. Before replacing a file whose checksum verifies, WriteFile keeps it
//     as path+PrevSuffix: a hard link, so that its data is never written again, or a copy where
//     the filesystem has no hard links, made under a temporary name and renamed over the older
//     previous copy. Once a previous copy has existed there is one at every moment, whatever
//     instant the process is killed at. A corrupt current file is not kept, so it never
//     displaces a good previous copy.
//   - Detection. ReadFile verifies the checksum: a torn, truncated, extended or edited file is
//     corrupt, never returned as data.
//   - Fallback. If the main copy is missing, unreadable or corrupt, ReadFile returns the
//     previous copy's body with an error wrapping ErrUsedPrevious. Decode also falls back when
//     the caller's parser rejects the main body as corrupt, but not when it rejects it for any
//     other reason (a newer format version, say), so newer data is never silently replaced.
//   - Telling failures apart. If no copy is usable, the error wraps fs.ErrNotExist only when
//     there is none at all, ErrCorrupt only when every copy there is corrupt, and otherwise the
//     reasons of the copies that could not be read or are of a format the parser refused.
//   - Setting aside. SetAside renames damaged copies to names that say when, never over another
//     file and never deleting one; Remove deletes a file and its previous copy, the previous
//     copy first, durably.
//   - Clean-up. Temporary files left by a write that was killed midway are removed by the next
//     write (or Remove) of the same path.
//
// # What is not covered
//
//   - A power cut relies on fsync and the filesystem. The guarantees hold across one only if
//     the storage device honours cache flushes (some SD cards and USB sticks acknowledge a flush
//     they have not done) and the filesystem makes a synced file and a synced directory entry
//     durable, as ext4, XFS and btrfs do in their default modes. On a filesystem mounted without
//     write barriers, or a network filesystem, a power cut may lose or damage both copies.
//   - Media failure or deletion of both copies, and history: the previous copy is one write
//     back, not a backup.
//   - Tampering: the checksum finds accidents, not someone who edits a file and recomputes it.
//   - Concurrent writers. There is no locking: one writer per path at a time, across processes
//     too (a second writer's temporary file would be removed as stale).
//   - Symbolic links: the rename replaces a link at the path, not the file it points to.
//   - If syncing the directory fails after the rename, WriteFile reports the error although the
//     new file is in place: only its survival across a power cut is in doubt.
//
// # What the caller must do
//
// Give WriteFile a body that is empty or ends in a newline, at most MaxBodySize bytes, and
// write (and Remove, and SetAside) each path from one goroutine of one process at a time. A
// parser given to Decode returns errors wrapping ErrCorrupt for content it cannot use, and
// other errors for content it must not pass over (a newer format version). On reading:
//
//   - nil: use the data.
//   - An error wrapping ErrUsedPrevious: log it, and go on with the data returned.
//   - An error wrapping fs.ErrNotExist: a first run; start with no state.
//   - An error wrapping ErrCorrupt: every copy is damaged. Call SetAside, so that the damaged
//     files are kept for inspection and out of the way of the next write, start with no state,
//     and say so loudly, at error level, naming the files set aside: whatever the state held
//     (a memory map, a calibration) has to be learned again.
//   - Any other error (a copy of a format this build does not know, a file that cannot be
//     read): leave the files alone and do not start with no state that the next write would
//     save over them; stop, or run without that state and without writing it, saying why.
//
// Do not name one stored file after another's previous copy (path+PrevSuffix), its temporary
// files (path+".tmp-…") or its set-aside copies (path+".damaged-…").
package store
