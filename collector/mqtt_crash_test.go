package collector

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"
)

// crashChildEnv names the broker a re-executed test binary is to take
// one message from and then hang on, until it is killed.
const crashChildEnv = "CLEANMON_MQTT_CRASH_CHILD"

func TestMain(m *testing.M) {
	if broker := os.Getenv(crashChildEnv); broker != "" {
		mqttCrashChild(broker)
		return
	}
	os.Exit(m.Run())
}

// hangingSink reports each message it is handed and never commits it.
type hangingSink struct{}

func (hangingSink) take(kind string) (Result, error) {
	fmt.Printf("taken %s\n", kind)
	select {} // a daemon stuck before its commit, until kill -9
}

func (h hangingSink) SubmitReadings(context.Context, []RawReading) (Result, error) {
	return h.take("readings")
}

func (h hangingSink) SubmitPressure(context.Context, []RawPressure) (Result, error) {
	return h.take("pressure")
}

func (h hangingSink) SubmitEnvironment(context.Context, []RawEnvironment) (Result, error) {
	return h.take("environment")
}

// mqttCrashChild runs a source against broker with a sink that hangs.
func mqttCrashChild(broker string) {
	reg, err := NewRegistry(demoCounters(), demoSensors())
	if err == nil {
		reg, err = reg.WithEnvironment(demoEnvironment(), EnvironmentBounds{})
	}
	var src *MQTTSource
	if err == nil {
		src, err = NewMQTTSource(demoMQTT(broker, "cleanmon-crash"), reg, hangingSink{}, MQTTOptions{})
	}
	if err != nil {
		fmt.Println("error", err)
		os.Exit(3)
	}
	go src.Run(context.Background())
	for !src.Connected() {
		time.Sleep(10 * time.Millisecond)
	}
	fmt.Println("connected")
	select {}
}

// A daemon killed with SIGKILL after taking a message and before its
// commit: the broker never got an acknowledgement, so the next daemon with
// the same session gets the message, and stores it.
func TestMQTTSourceKilledBeforeCommit(t *testing.T) {
	b := newBroker(t, "")
	broker := "tcp://" + b.addr
	child := exec.Command(os.Args[0], "-test.run=^$")
	child.Env = append(os.Environ(), crashChildEnv+"="+broker)
	out, err := child.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := child.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { child.Process.Kill(); child.Wait() })
	lines := make(chan string, 8)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			lines <- sc.Text()
		}
		close(lines)
	}()
	expect := func(prefix string) {
		t.Helper()
		deadline := time.After(15 * time.Second)
		for {
			select {
			case l, ok := <-lines:
				if !ok {
					t.Fatalf("the child exited before %q", prefix)
				}
				if strings.HasPrefix(l, prefix) {
					return
				}
			case <-deadline:
				t.Fatalf("the child did not say %q within 15 s", prefix)
			}
		}
	}
	expect("connected")
	publisher(t, broker)("building-c/asm/th", `{"time":"2026-03-02T09:10:00Z","temperature_c":21.4,"humidity_pct":46}`)
	expect("taken environment")
	if err := child.Process.Kill(); err != nil { // SIGKILL
		t.Fatal(err)
	}
	child.Wait()

	rig := newMQTTRig(t)
	src, err := NewMQTTSource(demoMQTT(broker, "cleanmon-crash"), demoEnvRegistry(t), rig, MQTTOptions{MinBackoff: 50 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	defer stop()
	waitFor(t, 15*time.Second, "the message delivered again and stored", func() bool { return rig.esink.len() == 1 })
}
