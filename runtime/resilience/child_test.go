package resilience

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/transport/broker"
)

// childEnv makes the test binary run an embedded broker instead of the
// tests, so a test can keep the broker's memory out of its own process.
const childEnv = "GODWIT_RESILIENCE_BROKER_CHILD"

func TestMain(m *testing.M) {
	if os.Getenv(childEnv) == "1" {
		b, err := broker.Start(broker.Config{})
		if err != nil {
			fmt.Println("error:", err)
			os.Exit(1)
		}
		fmt.Println(b.URL())
		// Serve until the parent closes stdin (or dies).
		io.Copy(io.Discard, os.Stdin)
		b.Close()
		os.Exit(0)
	}
	os.Exit(m.Run())
}

// childBroker starts an embedded broker in a child process and returns its
// URL; the child ends with the test.
func childBroker(t *testing.T) string {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), childEnv+"=1")
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		stdin.Close()
		cmd.Wait()
	})
	line, err := bufio.NewReader(out).ReadString('\n')
	if err != nil || !strings.HasPrefix(line, "tcp://") {
		t.Fatalf("broker child: %q, %v", line, err)
	}
	return strings.TrimSpace(line)
}
