package ops

import (
	"bytes"
	"fmt"
	"io"
	"os"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
)

// RecoveryOptions are the flags of `cleanmon recovery`.
type RecoveryOptions struct {
	Size, TargetClass, Location, Format string
	Differential                        bool
	Args                                []string // the one samples file
}

// Recovery fits the decay after a particle challenge at one size, for one
// location of a samples file, and prints it as text or JSON.
func Recovery(o RecoveryOptions, stdout io.Writer) error {
	if len(o.Args) != 1 {
		return usage(fmt.Errorf("give exactly one samples file (got %d)", len(o.Args)))
	}
	if o.Format != "text" && o.Format != "json" {
		return usage(fmt.Errorf("--format: %q (want text or json)", o.Format))
	}
	sz, err := classify.ParseSize(o.Size)
	if err != nil {
		return usage(fmt.Errorf("--size: %w", err))
	}
	var tc *float64
	if o.TargetClass != "" {
		n, err := parseClass("--target-class", o.TargetClass)
		if err != nil {
			return usage(err)
		}
		tc = &n
	}
	a, err := recoveryTest(o.Args[0], sz, o.Location, o.Differential, tc)
	if err != nil {
		return usage(err)
	}
	if o.Format == "json" {
		return printJSON(stdout, a)
	}
	if err := report.WriteRecovery(stdout, o.Args[0], a); err != nil {
		return silent(err)
	}
	return nil
}

// recoveryTest reads one location of a samples file and fits its decay
// at one size.
func recoveryTest(name string, size float64, loc string, differential bool, tc *float64) (classify.RecoveryTest, error) {
	data, err := os.ReadFile(name)
	if err != nil {
		return classify.RecoveryTest{}, err
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: []float64{size}, Differential: differential})
	if err != nil {
		return classify.RecoveryTest{}, err
	}
	times, conc, err := classify.RecoverySeries(samples, loc)
	if err == nil {
		var a classify.RecoveryTest
		if a, err = classify.FitRecoveryTest(times, conc, size, tc); err == nil {
			return a, nil
		}
	}
	return classify.RecoveryTest{}, fmt.Errorf("%s: %w", name, err)
}
