package loadtest

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"
)

// Child is a daemon process started by the bench.
type Child struct {
	cmd *exec.Cmd
	// URL is where it serves; Logs is its stderr.
	URL  string
	Logs *LockedWriter // its stderr
	done chan struct{}
}

// StartChild runs the binary and waits (bounded) for the line that gives
// its address.
func StartChild(bin string, args ...string) (*Child, error) {
	cmd := exec.Command(bin, args...)
	out, err := cmd.StdoutPipe()
	if err != nil {
		return nil, err
	}
	logs := &LockedWriter{}
	cmd.Stderr = logs
	if err := cmd.Start(); err != nil {
		return nil, err
	}
	c := &Child{cmd: cmd, Logs: logs, done: make(chan struct{})}
	urlc := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if _, u, ok := strings.Cut(sc.Text(), "serving on "); ok {
				urlc <- strings.TrimSpace(u)
			}
		}
		close(urlc)
	}()
	go func() { cmd.Wait(); close(c.done) }()
	select {
	case u, ok := <-urlc:
		if !ok {
			<-c.done
			return nil, fmt.Errorf("the daemon exited before serving: %s", logs.String())
		}
		c.URL = u
	case <-time.After(60 * time.Second):
		cmd.Process.Kill()
		return nil, errors.New("the daemon did not start within 60 s")
	}
	return c, nil
}

// Kill ends the Child at once (SIGKILL) and waits for it.
func (c *Child) Kill() {
	c.cmd.Process.Signal(syscall.SIGKILL)
	<-c.done
}

// Stop ends the child as a signal from an operator would (SIGTERM),
// killing it if it has not stopped in 30 s.
func (c *Child) Stop() {
	c.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-c.done:
	case <-time.After(30 * time.Second):
		c.cmd.Process.Kill()
		<-c.done
	}
}

// StopWithin is Stop with its own limit; false when the child had to be
// killed (its stop was not clean).
func (c *Child) StopWithin(limit time.Duration) bool {
	c.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-c.done:
		return true
	case <-time.After(limit):
		c.cmd.Process.Kill()
		<-c.done
		return false
	}
}

// RSS reads the Child's peak and current resident set size from /proc.
func (c *Child) RSS() (peakKB, curKB int64) {
	m := c.Status()
	return m["VmHWM:"], m["VmRSS:"]
}

// Status reads the kB figures of /proc/PID/status: VmRSS is RssAnon (the
// heap, the daemon's own memory) plus RssFile (the store's file pages that
// bbolt maps, which the kernel may drop and read again).
func (c *Child) Status() map[string]int64 {
	out := map[string]int64{}
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", c.cmd.Process.Pid))
	if err != nil {
		return out
	}
	for _, line := range strings.Split(string(b), "\n") {
		f := strings.Fields(line)
		if len(f) >= 2 {
			v, _ := strconv.ParseInt(f[1], 10, 64)
			out[f[0]] = v
		}
	}
	return out
}

// LockedWriter collects a Child's output; the test or bench reads it
// while the Child still writes.
type LockedWriter struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

// Write keeps p.
func (l *LockedWriter) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.buf.Write(p)
}

// String is what was written so far.
func (l *LockedWriter) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.buf.String()
}

// Done is closed when the child has exited.
func (c *Child) Done() <-chan struct{} { return c.done }

// Pid is the child's process id.
func (c *Child) Pid() int { return c.cmd.Process.Pid }

// Signal sends sig to the child (SIGHUP to reload its configuration).
func (c *Child) Signal(sig os.Signal) error { return c.cmd.Process.Signal(sig) }
