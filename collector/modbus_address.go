package collector

import (
	"fmt"
	"net"
	"net/url"
	"slices"
	"strconv"
	"strings"

	"github.com/simonvetter/modbus"
)

// Serial-line defaults of an rtu:// address: 19200 baud, even parity and
// one stop bit, the default of the Modbus serial line specification
// (Modbus over Serial Line V1.02, §2.5.1, from memory), which also asks
// for two stop bits when there is no parity.
const (
	DefaultModbusBaud   = 19200
	DefaultModbusParity = "even"
)

// modbusBauds are the speeds accepted: the common serial rates (common
// practice, no source). Anything else is far more likely a typo than a
// device.
var modbusBauds = []int{1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200}

// ModbusAddress is a parsed device address.
type ModbusAddress struct {
	// Serial is true for an rtu:// device on a serial line.
	Serial bool
	// Host is host:port of a Modbus TCP device; Port the serial device
	// path ("/dev/ttyUSB0") of an RTU one.
	Host, Port string
	// Baud, Parity ("none", "even", "odd") and StopBits of a serial line;
	// always 8 data bits, as RTU framing requires.
	Baud     int
	Parity   string
	StopBits int
}

// String gives the address as a person would write it.
func (a ModbusAddress) String() string {
	if !a.Serial {
		return a.Host
	}
	return fmt.Sprintf("rtu://%s?baud=%d&parity=%s&stop=%d", a.Port, a.Baud, a.Parity, a.StopBits)
}

// clientConfig returns the Modbus library's configuration for the address.
func (a ModbusAddress) clientConfig() modbus.ClientConfiguration {
	if !a.Serial {
		return modbus.ClientConfiguration{URL: "tcp://" + a.Host}
	}
	par := modbus.PARITY_EVEN
	switch a.Parity {
	case "none":
		par = modbus.PARITY_NONE
	case "odd":
		par = modbus.PARITY_ODD
	}
	return modbus.ClientConfiguration{URL: "rtu://" + a.Port, Speed: uint(a.Baud), DataBits: 8, Parity: par, StopBits: uint(a.StopBits)}
}

// ParseModbusAddress reads a device address: "host:port" or
// "tcp://host:port" for Modbus TCP, or
// "rtu:///dev/ttyUSB0?baud=19200&parity=even&stop=1" for Modbus RTU on a
// serial line (baud default 19200, parity none|even|odd default even,
// stop 1 or 2, default 1 with parity and 2 without). The error says what
// is wrong for a person.
func ParseModbusAddress(s string) (ModbusAddress, error) {
	if s == "" {
		return ModbusAddress{}, fmt.Errorf("missing: give host:port of the device, e.g. \"10.0.4.21:502\", or a serial line, e.g. \"rtu:///dev/ttyUSB0?baud=19200&parity=even\"")
	}
	scheme, rest, hasScheme := strings.Cut(s, "://")
	switch {
	case !hasScheme:
		return parseTCP(s, s)
	case scheme == "tcp":
		return parseTCP(s, rest)
	case scheme == "rtu":
		return parseRTU(s)
	}
	return ModbusAddress{}, fmt.Errorf("%q: unknown scheme %q (tcp:// for Modbus TCP, rtu:// for a serial line)", s, scheme)
}

func parseTCP(s, hostport string) (ModbusAddress, error) {
	host, port, err := net.SplitHostPort(hostport)
	if err != nil {
		return ModbusAddress{}, fmt.Errorf("%q is not host:port: %v", s, err)
	}
	if n, err := strconv.Atoi(port); err != nil || n < 1 || n > 65535 {
		return ModbusAddress{}, fmt.Errorf("%q: the port must be a number 1–65535 (Modbus TCP usually listens on 502)", s)
	}
	if host == "" {
		return ModbusAddress{}, fmt.Errorf("%q: the host is missing", s)
	}
	return ModbusAddress{Host: hostport}, nil
}

func parseRTU(s string) (ModbusAddress, error) {
	u, err := url.Parse(s)
	if err != nil {
		return ModbusAddress{}, fmt.Errorf("%q is not an rtu:// address: %v", s, err)
	}
	a := ModbusAddress{Serial: true, Port: u.Path, Baud: DefaultModbusBaud, Parity: DefaultModbusParity}
	switch {
	case u.Host != "":
		return a, fmt.Errorf("%q: give the serial device as a path after rtu://, e.g. rtu:///dev/ttyUSB0 (three slashes)", s)
	case !strings.HasPrefix(a.Port, "/"):
		return a, fmt.Errorf("%q: the serial device path is missing, e.g. rtu:///dev/ttyUSB0", s)
	case strings.ContainsFunc(a.Port, func(r rune) bool { return r <= ' ' || r == 0x7f || strings.ContainsRune("?#%", r) }):
		// No device node is named so, and the address must read back as
		// it was written (in the configuration, in logs).
		return a, fmt.Errorf("%q: the serial device path %q holds a space, a control character or one of ? # %%", s, a.Port)
	}
	q := u.Query()
	for k := range q {
		if k != "baud" && k != "parity" && k != "stop" {
			return a, fmt.Errorf("%q: unknown setting %q (baud, parity, stop)", s, k)
		}
		if len(q[k]) > 1 {
			return a, fmt.Errorf("%q: %s given twice", s, k)
		}
	}
	if v := q.Get("baud"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || !slices.Contains(modbusBauds, n) {
			return a, fmt.Errorf("%q: baud %q is not one of %v", s, v, modbusBauds)
		}
		a.Baud = n
	}
	if v := q.Get("parity"); v != "" {
		switch strings.ToLower(v) {
		case "none", "n":
			a.Parity = "none"
		case "even", "e":
			a.Parity = "even"
		case "odd", "o":
			a.Parity = "odd"
		default:
			return a, fmt.Errorf("%q: parity %q is not none, even or odd", s, v)
		}
	}
	a.StopBits = 1
	if a.Parity == "none" {
		a.StopBits = 2
	}
	if v := q.Get("stop"); v != "" {
		switch v {
		case "1":
			a.StopBits = 1
		case "2":
			a.StopBits = 2
		default:
			return a, fmt.Errorf("%q: stop %q: a serial line has 1 or 2 stop bits", s, v)
		}
	}
	return a, nil
}
