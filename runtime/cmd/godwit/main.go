// Command godwit is the sensor-fusion runtime: the daemon, the bench replay,
// the recorder, the simulator, the demo and the configuration checker in one
// binary. Run `godwit --help` for the commands.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/spf13/cobra"
)

// Exit codes of DESIGN.md: 0 ok, 2 bad usage or config, 1 runtime failure.
const (
	exitOK      = 0
	exitRuntime = 1
	exitUsage   = 2
)

// usageError marks errors that are the caller's to fix (exit 2).
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func usagef(format string, a ...any) error { return usageError{fmt.Errorf(format, a...)} }

// usageArgs makes a cobra argument check report bad usage (exit 2).
func usageArgs(check cobra.PositionalArgs) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		if err := check(cmd, args); err != nil {
			return usageError{err}
		}
		return nil
	}
}

// commands lists the sub-commands; each command's file adds itself in an init
// function, so commands can be developed side by side without touching this file.
var commands []func() *cobra.Command

func newRootCmd() *cobra.Command {
	root := &cobra.Command{
		Use:   "godwit",
		Short: "Sensor-fusion runtime: MQTT in, fused tracks with uncertainty out",
		Long: `godwit takes time-stamped sensor measurements over MQTT, aligns them in time,
runs square-root filters and a multi-target tracker, and publishes fused tracks,
health and latency. The same binary replays recordings deterministically on a bench.

godwit is not a certified safety component; see the README.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetFlagErrorFunc(func(c *cobra.Command, err error) error { return usageError{err} })
	root.AddCommand(newVersionCmd())
	for _, c := range commands {
		root.AddCommand(c())
	}
	// cobra's own commands get an example too, like every other command.
	root.InitDefaultHelpCmd()
	root.InitDefaultCompletionCmd()
	for _, c := range root.Commands() {
		switch {
		case c.Name() == "help" && c.Example == "":
			c.Example = "  godwit help replay"
		case c.Name() == "completion" && c.Example == "":
			c.Example = "  godwit completion bash > /etc/bash_completion.d/godwit"
		}
	}
	return root
}

func main() {
	// SIGINT/SIGTERM cancel the context: long-running commands (run, record,
	// replay) stop gracefully and exit 0.
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := runContext(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

func run(args []string) int { return runContext(context.Background(), args, os.Stdout, os.Stderr) }

// runContext runs one command line and returns its exit code; tests drive
// the commands through it with their own context and output streams.
func runContext(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	root := newRootCmd()
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.ExecuteContext(ctx)
	if err == nil {
		return exitOK
	}
	fmt.Fprintln(stderr, "godwit:", err)
	var ue usageError
	// cobra reports an unknown sub-command and a missing required flag as
	// plain errors; both are bad usage too.
	msg := err.Error()
	if errors.As(err, &ue) || strings.HasPrefix(msg, "unknown command") || strings.HasPrefix(msg, "required flag") {
		return exitUsage
	}
	return exitRuntime
}
