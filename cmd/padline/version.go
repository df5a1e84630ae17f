package main

import (
	"runtime/debug"
	"sync"
)

// buildVersion is set at link time by the build scripts
// (-ldflags "-X main.buildVersion=$(git describe --always --dirty)"); it
// wins over what Go's build info knows, which is nothing when VCS stamping
// is off (GOFLAGS=-buildvcs=false).
var buildVersion string

// softwareVersion is what every run records as the software that judged it:
// the link-time version, else the module version or the VCS revision (with
// "+dirty" for a modified tree) that Go embeds at build time.
var softwareVersion = sync.OnceValue(func() string {
	if buildVersion != "" {
		return "padline " + buildVersion
	}
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "padline (unknown build)"
	}
	v := bi.Main.Version
	var rev, dirty string
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			if s.Value == "true" {
				dirty = "+dirty"
			}
		}
	}
	if rev != "" && (v == "" || v == "(devel)") {
		if len(rev) > 12 {
			rev = rev[:12]
		}
		return "padline " + rev + dirty
	}
	if v == "" {
		v = "(devel)"
	}
	return "padline " + v
})
