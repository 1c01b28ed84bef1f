// Package cli is the flowcat command line: one file per command. Offline
// commands (validate, schema) call schema, quality and catalog directly;
// client commands talk to a server over HTTP; init, serve, token and demo
// work on a data directory.
package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/mattn/go-isatty"
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/server"
)

// Exit codes scripts rely on.
const (
	ExitOK       = 0 // success
	ExitRejected = 1 // data rejected, check failed, or the operation failed
	ExitUsage    = 2 // the command line is wrong
)

// exitError carries an exit code with its message.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

func usageErr(format string, args ...any) error {
	return &exitError{code: ExitUsage, err: fmt.Errorf(format, args...)}
}

// errSilent is an exit-1 failure whose report the command printed itself.
var errSilent = &exitError{code: ExitRejected, err: errors.New("")}

// env is what every command shares: streams and global flags.
type env struct {
	stdout, stderr io.Writer
	stdin          io.Reader
	json           bool
	quiet          bool
	server         string
	token          string
}

// tty reports whether stdout is a terminal (progress bars, colour).
func (e *env) tty() bool {
	f, ok := e.stdout.(*os.File)
	return ok && (isatty.IsTerminal(f.Fd()) || isatty.IsCygwinTerminal(f.Fd()))
}

// Main runs the command line with args (without the program name) and
// returns the process exit code.
func Main(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	e := &env{stdout: stdout, stderr: stderr, stdin: stdin}
	root := newRoot(e)
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.ExecuteContext(ctx)
	if err == nil {
		return ExitOK
	}
	code := ExitRejected
	var xe *exitError
	if errors.As(err, &xe) {
		code = xe.code
	} else if strings.HasPrefix(err.Error(), "unknown command") || strings.HasPrefix(err.Error(), "unknown flag") {
		code = ExitUsage // cobra's own usage errors
	}
	if msg := err.Error(); msg != "" {
		fmt.Fprintln(stderr, "flowcat:", msg)
	}
	return code
}

func newRoot(e *env) *cobra.Command {
	root := &cobra.Command{
		Use:   "flowcat",
		Short: "A catalog server for pseudonymized, quality-scored service-event snapshots",
		Long: `flowcat takes partner sites' nightly service-event exports, checks them
against the common service-event schema through each dataset's mapping profile,
pseudonymizes identifiers, scores their quality and keeps immutable, versioned
Parquet snapshots that students pull and verify. New here? Run flowcat demo.`,
		SilenceErrors: true,
		SilenceUsage:  true,
	}
	// flowcat --version: the module version and VCS revision the Go
	// toolchain recorded in the binary.
	version, goVersion := server.BuildVersion()
	root.Version = version + " (" + goVersion + ")"
	root.SetVersionTemplate("flowcat {{.Version}}\n")
	root.SetFlagErrorFunc(func(c *cobra.Command, err error) error {
		return &exitError{code: ExitUsage, err: fmt.Errorf("%w\n%s", err, c.UsageString())}
	})
	pf := root.PersistentFlags()
	pf.BoolVar(&e.json, "json", false, "print machine-readable JSON")
	pf.BoolVarP(&e.quiet, "quiet", "q", false, "no progress bars or chatter")
	// The environment is read when a client is made, not as flag defaults,
	// so that --help never prints a token.
	pf.StringVar(&e.server, "server", "", "server URL (default: env FLOWCAT_SERVER)")
	pf.StringVar(&e.token, "token", "", "API token (default: env FLOWCAT_TOKEN)")

	root.AddCommand(
		newInitCmd(e), newServeCmd(e), newTokenCmd(e),
		newProjectCmd(e), newDatasetCmd(e), newUploadCmd(e), newUploadsCmd(e), newVersionsCmd(e),
		newPullCmd(e), newVerifyCmd(e), newQualityCmd(e),
		newPublishCmd(e), newRetractCmd(e), newGCCmd(e), newDisclosureCmd(e), newDisclosurePolicyCmd(e), newAuditCmd(e), newMasterKeyCmd(e), newPseudonymKeyCmd(e),
		newAlertsCmd(e), newSummaryCmd(e), newExportCmd(e), newBundleCmd(e), newCiteCmd(e), newDiffCmd(e),
		newValidateCmd(e), newSchemaCmd(e), newDemoCmd(e), newManCmd(e), newReadyCmd(e),
	)
	addCompletion(root, e)
	for _, c := range root.Commands() {
		wrapArgs(c)
	}
	return root
}

// wrapArgs makes argument-count errors usage errors (exit 2), and so a
// group command (token, project, dataset) called without a known
// subcommand.
func wrapArgs(c *cobra.Command) {
	if c.HasSubCommands() && c.Run == nil && c.RunE == nil {
		c.Args = cobra.ArbitraryArgs
		c.RunE = func(cmd *cobra.Command, args []string) error {
			if len(args) > 0 {
				return usageErr("unknown command %q for %q\n%s", args[0], cmd.CommandPath(), cmd.UsageString())
			}
			return usageErr("%s needs a subcommand\n%s", cmd.CommandPath(), cmd.UsageString())
		}
		for _, sub := range c.Commands() {
			wrapArgs(sub)
		}
		return
	}
	if c.Args != nil {
		check := c.Args
		c.Args = func(cmd *cobra.Command, args []string) error {
			if err := check(cmd, args); err != nil {
				return &exitError{code: ExitUsage, err: fmt.Errorf("%s: %w\nusage: %s", cmd.CommandPath(), err, cmd.UseLine())}
			}
			return nil
		}
	}
	for _, sub := range c.Commands() {
		wrapArgs(sub)
	}
}
