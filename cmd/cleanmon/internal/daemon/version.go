package daemon

import (
	"runtime"
	"runtime/debug"

	"github.com/prometheus/client_golang/prometheus"
)

// version and revision are stamped at build time:
//
//	go build -ldflags "-X cleanmon/cmd/cleanmon/internal/daemon.version=1.4.0 -X cleanmon/cmd/cleanmon/internal/daemon.revision=$(git rev-parse HEAD)" ./cmd/cleanmon
//
// Unstamped, they come from the module and VCS information Go records in
// the binary (debug.ReadBuildInfo), or say "unknown".
var version, revision string

// Build says which cleanmon this is.
type Build struct {
	Version   string // a release such as 1.4.0, "(devel)", or "unknown"
	Revision  string // the VCS revision, "-modified" appended for a dirty tree
	GoVersion string
}

// BuildInfo returns the version, revision and Go version of the running
// binary.
func BuildInfo() Build {
	b := Build{Version: version, Revision: revision, GoVersion: runtime.Version()}
	if info, ok := debug.ReadBuildInfo(); ok {
		if b.Version == "" {
			b.Version = info.Main.Version
		}
		if b.Revision == "" {
			modified := false
			for _, s := range info.Settings {
				switch s.Key {
				case "vcs.revision":
					b.Revision = s.Value
				case "vcs.modified":
					modified = s.Value == "true"
				}
			}
			if b.Revision != "" && modified {
				b.Revision += "-modified"
			}
		}
	}
	if b.Version == "" {
		b.Version = "unknown"
	}
	if b.Revision == "" {
		b.Revision = "unknown"
	}
	return b
}

// buildInfoCollector is cleanmon_build_info: one series of value 1
// naming the build, so that a fleet's dashboard shows which suite runs
// which version.
func buildInfoCollector() prometheus.Collector {
	b := BuildInfo()
	g := prometheus.NewGauge(prometheus.GaugeOpts{
		Name:        "cleanmon_build_info",
		Help:        "The running cleanmon build: always 1, with its version, VCS revision and Go version as labels.",
		ConstLabels: prometheus.Labels{"version": b.Version, "revision": b.Revision, "goversion": b.GoVersion},
	})
	g.Set(1)
	return g
}
