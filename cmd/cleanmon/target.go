package main

import (
	"flag"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/ops"
)

// registerTarget defines the flags that name what a zone is classified
// against; limits, plan and certify share them so they read the same
// everywhere.
func registerTarget(fs *flag.FlagSet, f *ops.TargetSpec, withArea bool) {
	fs.StringVar(&f.Class, "class", "", "ISO 14644-1 class, 1–9 in steps of 0.1")
	fs.StringVar(&f.Grade, "grade", "", "EU GMP Annex 1 grade A, B, C or D (instead of --class)")
	fs.StringVar(&f.State, "state", classify.AtRest, "operating state: at-rest or in-operation")
	fs.StringVar(&f.Edition, "edition", "2015", "ISO 14644-1 edition: 2015, or 1999 (legacy)")
	fs.StringVar(&f.Sizes, "sizes", "", "considered threshold sizes in µm, comma-separated")
	fs.BoolVar(&f.AllowBlank, "allow-blank-cells", false, "accept sizes the class table leaves blank (reported, not judged)")
	if withArea {
		fs.Float64Var(&f.Area, "area", 0, "floor area of the zone in m²")
		fs.Float64Var(&f.Flow, "flow", classify.DefaultFlowLPM, "counter sample flow in L/min: the plan's sample time, and the sampling time of a sample without duration_s (its volume over this flow), checked against the 1-minute minimum")
	}
}
