package daemon

import (
	"context"
	"errors"
	"net"
	"os"
	"strconv"
	"strings"
	"sync"
	"time"
)

// notifier speaks the service manager's notification protocol (systemd's
// sd_notify): datagrams of "KEY=VALUE" lines on the unix socket named by
// $NOTIFY_SOCKET. Written by hand: it is one datagram write, and no
// library of the project's allowed set does it. Without $NOTIFY_SOCKET
// every send does nothing.
type notifier struct {
	addr     *net.UnixAddr
	watchdog time.Duration // from $WATCHDOG_USEC; 0: no watchdog asked for
}

// newNotifier reads the environment a service manager sets. A
// $WATCHDOG_PID naming another process means the watchdog is not ours.
func newNotifier() notifier {
	var n notifier
	path := os.Getenv("NOTIFY_SOCKET")
	if path == "" {
		return n
	}
	if strings.HasPrefix(path, "@") {
		path = "\x00" + path[1:] // an abstract socket
	}
	n.addr = &net.UnixAddr{Name: path, Net: "unixgram"}
	if pid := os.Getenv("WATCHDOG_PID"); pid != "" && pid != strconv.Itoa(os.Getpid()) {
		return n
	}
	if us, err := strconv.ParseInt(os.Getenv("WATCHDOG_USEC"), 10, 64); err == nil && us > 0 {
		n.watchdog = time.Duration(us) * time.Microsecond
	}
	return n
}

// send writes one notification; nil when there is no manager to tell.
func (n notifier) send(state string) error {
	if n.addr == nil {
		return nil
	}
	c, err := net.DialUnix("unixgram", nil, n.addr)
	if err != nil {
		return err
	}
	defer c.Close()
	_, err = c.Write([]byte(state))
	return err
}

// errUnhealthy: a liveness check did not pass; the watchdog is not fed.
var errUnhealthy = errors.New("daemon: liveness check failed")

// watch feeds the watchdog at half its period for as long as alive
// passes within that half period: a daemon whose store or rules hang
// stops feeding it, and the service manager restarts it.
func (n notifier) watch(ctx context.Context, wg *sync.WaitGroup, alive func(context.Context) error, log func(error)) {
	if n.addr == nil || n.watchdog <= 0 {
		return
	}
	every := n.watchdog / 2
	wg.Add(1)
	go func() {
		defer wg.Done()
		t := time.NewTicker(every)
		defer t.Stop()
		for {
			cctx, cancel := context.WithTimeout(ctx, every)
			err := alive(cctx)
			cancel()
			if ctx.Err() != nil {
				return
			}
			if err == nil {
				err = n.send("WATCHDOG=1")
			}
			if err != nil {
				log(err)
			}
			select {
			case <-ctx.Done():
				return
			case <-t.C:
			}
		}
	}()
}

// alive is the watchdog's liveness check: the store answers a read and
// the alarm rules take a task from their queue, each within ctx.
func (d *Daemon) alive(ctx context.Context) error {
	done := make(chan error, 2)
	go func() {
		_, _, err := d.st.AuditHead()
		done <- err
	}()
	go func() {
		ran := make(chan struct{})
		d.alarms.enqueue(ctx, func(context.Context) { close(ran) })
		select {
		case <-ran:
			done <- nil
		case <-ctx.Done():
			done <- errUnhealthy
		}
	}()
	for range 2 {
		select {
		case err := <-done:
			if err != nil {
				return errors.Join(errUnhealthy, err)
			}
		case <-ctx.Done():
			return errUnhealthy
		}
	}
	return nil
}
