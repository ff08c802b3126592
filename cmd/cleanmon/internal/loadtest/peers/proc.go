package peers

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"
)

// Errors a caller may test for with errors.Is.
var (
	// ErrNotReady means a peer did not answer its health route in time.
	ErrNotReady = errors.New("peer did not become ready")
	// ErrStop means a peer did not exit after SIGTERM in time and was killed.
	ErrStop = errors.New("peer did not stop after SIGTERM")
	// ErrExited means a peer process ended before it was asked to.
	ErrExited = errors.New("peer process exited")
	// ErrCount means a peer stored a different number of readings than it was sent.
	ErrCount = errors.New("stored reading count differs from readings sent")
	// ErrOptions means an option is out of range.
	ErrOptions = errors.New("bad option")
	// ErrMissing means a peer's binary was not found.
	ErrMissing = errors.New("peer binary not found")
	// ErrAnswer means a peer answered with an error status or a body
	// that could not be read as expected.
	ErrAnswer = errors.New("unexpected answer from peer")
)

// stack runs undo steps in reverse order, once: every started process and
// every temporary directory is pushed as soon as it exists, so an error or
// a cancelled context anywhere leaves nothing running behind.
type stack struct {
	mu    sync.Mutex
	steps []func()
}

func (s *stack) push(f func()) {
	s.mu.Lock()
	s.steps = append(s.steps, f)
	s.mu.Unlock()
}

func (s *stack) run() {
	s.mu.Lock()
	steps := s.steps
	s.steps = nil
	s.mu.Unlock()
	for i := len(steps) - 1; i >= 0; i-- {
		steps[i]()
	}
}

// freePort asks the kernel for a free loopback port. Another process may
// take it before the peer binds it; start retries on that.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// process is one running peer binary with its output kept in a log file
// outside the data directories (so it is not counted as stored bytes).
type process struct {
	cmd     *exec.Cmd
	logPath string
	done    chan struct{}
	err     error // set before done closes
}

// startProcess starts bin with args. The process gets SIGKILL when the
// context ends (and, on Linux, when this process dies), so no peer
// outlives the run.
func startProcess(ctx context.Context, bin string, args []string, logPath string) (*process, error) {
	logf, err := os.Create(logPath)
	if err != nil {
		return nil, err
	}
	cmd := exec.CommandContext(ctx, bin, args...)
	cmd.Stdout, cmd.Stderr = logf, logf
	cmd.SysProcAttr = sysProcAttr()
	cmd.WaitDelay = 5 * time.Second
	if err := cmd.Start(); err != nil {
		logf.Close()
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	p := &process{cmd: cmd, logPath: logPath, done: make(chan struct{})}
	go func() {
		p.err = cmd.Wait()
		logf.Close()
		close(p.done)
	}()
	return p, nil
}

// exited reports whether the process has ended.
func (p *process) exited() bool {
	select {
	case <-p.done:
		return true
	default:
		return false
	}
}

// stop sends SIGTERM and waits up to limit for the exit, then kills. A
// peer that needed the kill, or had already ended on its own, is an
// error: its files may not be complete.
func (p *process) stop(limit time.Duration) error {
	if p.exited() {
		return fmt.Errorf("%s: %w before it was stopped: %v; log: %s", filepath.Base(p.cmd.Path), ErrExited, p.err, p.tail())
	}
	_ = p.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-p.done:
		return nil
	case <-time.After(limit):
		_ = p.cmd.Process.Kill()
		<-p.done
		return fmt.Errorf("%s after %s: %w", filepath.Base(p.cmd.Path), limit, ErrStop)
	}
}

// kill ends the process at once; used by the stop stack on errors.
func (p *process) kill() {
	if !p.exited() {
		_ = p.cmd.Process.Kill()
		<-p.done
	}
}

// tail returns the end of the process's log, for error messages.
func (p *process) tail() string {
	b, err := os.ReadFile(p.logPath)
	if err != nil {
		return ""
	}
	if len(b) > 1500 {
		b = b[len(b)-1500:]
	}
	return string(bytes.TrimSpace(b))
}

// waitReady polls url until it answers with want, the process exits, or
// limit passes.
func waitReady(ctx context.Context, p *process, url string, want int, limit time.Duration) error {
	deadline := time.Now().Add(limit)
	client := &http.Client{Timeout: 2 * time.Second}
	for time.Now().Before(deadline) {
		if p.exited() {
			return fmt.Errorf("%s: %w before it was ready: %v; log: %s", filepath.Base(p.cmd.Path), ErrExited, p.err, p.tail())
		}
		req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
		if err != nil {
			return err
		}
		if resp, err := client.Do(req); err == nil {
			resp.Body.Close()
			if resp.StatusCode == want {
				return nil
			}
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
	return fmt.Errorf("%s at %s within %s: %w; log: %s", filepath.Base(p.cmd.Path), url, limit, ErrNotReady, p.tail())
}

// diskUsage walks root and sums every regular file: the apparent size
// (st_size) and the allocated size (st_blocks × 512), the latter also by
// top-level entry of root. Directories and symbolic links themselves are
// not counted.
func diskUsage(root string) (apparent, allocated int64, byDir map[string]int64, err error) {
	byDir = map[string]int64{}
	err = filepath.Walk(root, func(path string, info os.FileInfo, err error) error {
		if err != nil {
			return err
		}
		if !info.Mode().IsRegular() {
			return nil
		}
		apparent += info.Size()
		if st, ok := info.Sys().(*syscall.Stat_t); ok {
			allocated += st.Blocks * 512
			rel, _ := filepath.Rel(root, path)
			byDir[strings.SplitN(filepath.ToSlash(rel), "/", 2)[0]] += st.Blocks * 512
		}
		return nil
	})
	return apparent, allocated, byDir, err
}

func itoa(n int) string { return strconv.Itoa(n) }
