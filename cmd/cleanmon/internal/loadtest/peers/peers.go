package peers

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"time"
)

// Options are the knobs of a peer run. The zero value of a field takes
// the default named beside it.
type Options struct {
	Counters    int       // live-shape counters, default 200
	Minutes     int       // per-minute readings of each counter, default 5000 (1 M readings at 200 counters)
	Batch       int       // readings per request, default 1000
	Writers     int       // concurrent writers, default 4
	Year        bool      // also load and query one location's year
	YearMinutes int       // length of that "year" in minutes, default 525 600; tests shorten it
	Seed        uint64    // of the invented counts, default 14644
	End         time.Time // the minute after the last reading, default an hour before now; kept to whole minutes

	Dir  string // parent of the temporary directories, default os.TempDir()
	Keep bool   // keep the temporary directories (their path goes to the log)

	Influxd         string   // InfluxDB 1.x server binary, default "influxd" on PATH
	VictoriaMetrics string   // VictoriaMetrics single-node binary, default "victoria-metrics" on PATH
	Only            []string // peer names to run ("influxdb", "victoria-metrics"); empty runs both

	StartTimeout   time.Duration // a peer's start until it answers, default 60s
	StopTimeout    time.Duration // SIGTERM until exit, default 60s
	RequestTimeout time.Duration // any one HTTP request, default 120s
}

func (o Options) withDefaults() Options {
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&o.Counters, 200)
	def(&o.Minutes, 5000)
	def(&o.Batch, 1000)
	def(&o.Writers, 4)
	def(&o.YearMinutes, 525600)
	for _, d := range []*time.Duration{&o.StartTimeout, &o.StopTimeout} {
		if *d == 0 {
			*d = 60 * time.Second
		}
	}
	if o.RequestTimeout == 0 {
		o.RequestTimeout = 120 * time.Second
	}
	if o.End.IsZero() {
		o.End = time.Now().UTC().Add(-time.Hour)
	}
	o.End = o.End.Truncate(time.Minute)
	if o.Seed == 0 {
		o.Seed = 14644
	}
	if o.Influxd == "" {
		o.Influxd = "influxd"
	}
	if o.VictoriaMetrics == "" {
		o.VictoriaMetrics = "victoria-metrics"
	}
	return o
}

func (o Options) check() error {
	switch {
	case o.Counters < 1:
		return fmt.Errorf("%w: Counters %d, want ≥ 1", ErrOptions, o.Counters)
	case o.Minutes < 1:
		return fmt.Errorf("%w: Minutes %d, want ≥ 1", ErrOptions, o.Minutes)
	case o.Batch < 1:
		return fmt.Errorf("%w: Batch %d, want ≥ 1", ErrOptions, o.Batch)
	case o.Writers < 1:
		return fmt.Errorf("%w: Writers %d, want ≥ 1", ErrOptions, o.Writers)
	case o.Year && o.YearMinutes < 120:
		return fmt.Errorf("%w: YearMinutes %d, want ≥ 120 (two hours, so the hourly query has rows)", ErrOptions, o.YearMinutes)
	}
	for _, n := range o.Only {
		if n != nameInflux && n != nameVictoria {
			return fmt.Errorf("%w: Only %q, want %q or %q", ErrOptions, n, nameInflux, nameVictoria)
		}
	}
	return nil
}

const (
	nameInflux   = "influxdb"
	nameVictoria = "victoria-metrics"
)

// Available names the peer binaries that are not found, each with the
// Debian package that brings it, e.g. "influxd (apt-get install
// influxdb)". Empty means both peers can run.
func Available() (missing []string) {
	return missingBinaries(Options{}.withDefaults())
}

func missingBinaries(o Options) (missing []string) {
	for _, b := range []struct{ bin, pkg string }{{o.Influxd, "influxdb"}, {o.VictoriaMetrics, "victoria-metrics"}} {
		if _, err := exec.LookPath(b.bin); err != nil {
			missing = append(missing, fmt.Sprintf("%s (apt-get install %s)", b.bin, b.pkg))
		}
	}
	return missing
}

// Figures are one peer's measurements.
type Figures struct {
	Peer    string // "influxdb" or "victoria-metrics"
	Version string // as the peer reports it
	// Durable says whether an acknowledged write is on disk: true for
	// InfluxDB with its WAL fsynced per write, false for VictoriaMetrics.
	Durable bool

	// Live shape.
	Readings          int64         // readings sent, and counted back
	IngestTime        time.Duration // first request until the last acknowledgement (VictoriaMetrics: and its force_flush)
	ReadingsPerSecond float64       // Readings / IngestTime
	// Disk after a clean stop with the live shape only: the blocks
	// allocated (st_blocks × 512) to every regular file under the peer's
	// storage directory (InfluxDB: meta, data, wal; VictoriaMetrics:
	// -storageDataPath). Allocated, not apparent, size: InfluxDB
	// preallocates sparse series-file segments whose apparent size says
	// nothing about the disk used. Logs and the config live outside the
	// storage directory and are not counted.
	BytesOnDisk     int64
	ApparentBytes   int64            // the same files' apparent sizes (st_size)
	BytesByDir      map[string]int64 // BytesOnDisk by top-level directory of the storage (e.g. "wal", "data")
	BytesPerReading float64          // BytesOnDisk / Readings

	// One location's year, loaded after a restart on the same storage.
	YearReadings       int64
	YearRaw            time.Duration // raw export of the year, request to last byte
	YearRawRows        int64
	YearHourly         time.Duration // hourly means of the year, request to last byte
	YearHourlyRows     int64
	BytesOnDiskAll     int64   // allocated, after a clean stop with live shape and year
	BytesPerReadingAll float64 // BytesOnDiskAll / (Readings + YearReadings)
}

// Results are the figures of every peer run.
type Results struct {
	Machine string
	Options Options // with defaults filled in: Options.End and Seed give Readings the same readings
	Peers   []Figures
}

// Figure names one comparable figure.
type Figure int

// The figures a caller can compare with its own.
const (
	ReadingsPerSecond Figure = iota // higher is better
	BytesPerReading                 // lower is better
	YearRawSeconds                  // lower is better
	YearHourlySeconds               // lower is better
)

// ErrNoFigure means a ratio was asked for a peer or figure the run did
// not measure.
var ErrNoFigure = errors.New("no such figure in the results")

// Get returns a peer's figure in its own unit (readings/s, bytes,
// seconds).
func (r Results) Get(peer string, f Figure) (float64, error) {
	for _, p := range r.Peers {
		if p.Peer != peer {
			continue
		}
		var v float64
		switch f {
		case ReadingsPerSecond:
			v = p.ReadingsPerSecond
		case BytesPerReading:
			v = p.BytesPerReading
		case YearRawSeconds:
			v = p.YearRaw.Seconds()
		case YearHourlySeconds:
			v = p.YearHourly.Seconds()
		default:
			return 0, fmt.Errorf("%w: figure %d", ErrNoFigure, f)
		}
		if v <= 0 {
			return 0, fmt.Errorf("%w: %s figure %d was not measured", ErrNoFigure, peer, f)
		}
		return v, nil
	}
	return 0, fmt.Errorf("%w: peer %q", ErrNoFigure, peer)
}

// Ratio divides cleanmon's figure by the peer's, in the same unit: 1.5
// for readings/s means cleanmon takes in 1.5 times as much; 0.5 for bytes
// or seconds means it needs half as much.
func (r Results) Ratio(peer string, f Figure, ours float64) (float64, error) {
	v, err := r.Get(peer, f)
	if err != nil {
		return 0, err
	}
	return ours / v, nil
}

// Run starts each peer in turn (never two at once, so they do not share
// the cores), drives the same readings into it, checks every reading
// came back, measures, and stops it. Progress goes to log. Every process
// is killed and every temporary directory removed (unless Keep) when Run
// returns, also on error or a cancelled context.
func Run(ctx context.Context, o Options, log io.Writer) (Results, error) {
	o = o.withDefaults()
	if err := o.check(); err != nil {
		return Results{}, err
	}
	res := Results{Machine: machine(), Options: o}
	var todo []string
	if len(o.Only) == 0 {
		todo = []string{nameInflux, nameVictoria}
	} else {
		todo = o.Only
	}
	for _, name := range todo {
		bin := o.Influxd
		if name == nameVictoria {
			bin = o.VictoriaMetrics
		}
		path, err := exec.LookPath(bin)
		if err != nil {
			return res, fmt.Errorf("%s: %w: %v", name, ErrMissing, err)
		}
		if name == nameInflux {
			o.Influxd = path
		} else {
			o.VictoriaMetrics = path
		}
	}
	fmt.Fprintf(log, "peers: building %d live readings (%d counters × %d minutes)", int64(o.Counters)*int64(o.Minutes), o.Counters, o.Minutes)
	if o.Year {
		fmt.Fprintf(log, " and a year of %d readings", o.YearMinutes)
	}
	fmt.Fprintln(log)
	w := buildWorkload(o)
	for _, name := range todo {
		f, err := runPeer(ctx, o, name, w, log)
		if err != nil {
			return res, fmt.Errorf("%s: %w", name, err)
		}
		res.Peers = append(res.Peers, f)
	}
	return res, nil
}

// server is what Run needs of a peer.
type server interface {
	name() string
	durable() bool
	dataDir() string
	start(ctx context.Context) error
	write(ctx context.Context, body []byte) error
	flush(ctx context.Context) error
	count(ctx context.Context, from, to int64) ([4]int64, error)
	raw(ctx context.Context, from, to int64) (rows int64, d time.Duration, err error)
	hourly(ctx context.Context, from, to int64) (rows int64, d time.Duration, err error)
	stop() error
	kill()
	version(ctx context.Context) string
}

func newServer(o Options, name, root string) server {
	if name == nameInflux {
		return &influx{bin: o.Influxd, root: root, o: o}
	}
	return &victoria{bin: o.VictoriaMetrics, root: root, o: o}
}

// runPeer measures one peer in a temporary directory of its own.
func runPeer(ctx context.Context, o Options, name string, w *workload, log io.Writer) (f Figures, err error) {
	var undo stack
	defer undo.run()
	root, err := os.MkdirTemp(o.Dir, "cleanmon-peer-"+name+"-")
	if err != nil {
		return f, err
	}
	if o.Keep {
		fmt.Fprintf(log, "peers: %s: keeping %s\n", name, root)
	} else {
		undo.push(func() { os.RemoveAll(root) })
	}
	s := newServer(o, name, root)
	undo.push(s.kill)
	f = Figures{Peer: name, Durable: s.durable()}
	if err := s.start(ctx); err != nil {
		return f, err
	}
	f.Version = s.version(ctx)
	fmt.Fprintf(log, "peers: %s (%s) started\n", name, f.Version)
	if err := measureLive(ctx, o, s, w, &f, log); err != nil {
		return f, err
	}
	if !o.Year {
		return f, nil
	}
	if err := s.start(ctx); err != nil {
		return f, fmt.Errorf("restart: %w", err)
	}
	return f, measureYear(ctx, o, s, w, &f, log)
}
