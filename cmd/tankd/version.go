package main

import (
	"runtime/debug"
)

// version is the release, set at build time with -ldflags "-X main.version=v1.2.3"; a build
// from a checkout says "devel" and its revision.
var version = ""

// versionString is the version to show: the release, or the module's version and the source
// revision the binary was built from.
func versionString() string {
	if version != "" {
		return version
	}
	v := "devel"
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return v
	}
	if bi.Main.Version != "" && bi.Main.Version != "(devel)" {
		v = bi.Main.Version
	}
	var rev, dirty string
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			if s.Value == "true" {
				dirty = "+changes"
			}
		}
	}
	if len(rev) > 12 {
		rev = rev[:12]
	}
	if rev != "" {
		v += " " + rev + dirty
	}
	return v
}
