// Command scanfold turns an RGB-D sweep of a part into a model that a
// robot cell's point-pair-feature pose estimator can use. This package
// is the command line only: flags in, a library call, output out.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"runtime"
	"syscall"

	"github.com/urfave/cli/v2"
)

// Version is scanfold's version string; release builds set it with
// -ldflags "-X main.Version=...".
var Version = "0.1.0-dev"

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// run executes the command line args and returns the exit code: 0 on
// success, 1 on an error, 130 when interrupted (the shell's code for
// SIGINT).
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	app := newApp(stdout, stderr)
	err := app.RunContext(ctx, interspersed(app, args))
	switch {
	case err == nil:
		return 0
	case errors.Is(err, context.Canceled):
		fmt.Fprintln(stderr, "scanfold: interrupted; nothing half-written was left behind")
		return 130
	default:
		fmt.Fprintln(stderr, "scanfold:", err)
		return 1
	}
}

func newApp(stdout, stderr io.Writer) *cli.App {
	return &cli.App{
		Name:  "scanfold",
		Usage: "turn an RGB-D sweep of a part into a pose-estimation model",
		Description: "scanfold fuses an RGB-D sweep (turntable or handheld) into a coloured mesh, " +
			"derives an oriented point cloud and point-pair-feature tables, checks the model on " +
			"synthetic renders and files it in a local catalog. Lengths accept millimetres or " +
			"metres (2mm, 0.002, 0.4m).\n\n" +
			"A model that passes still needs a supervised, reduced-speed trial in the robot cell, " +
			"under the cell's risk assessment and local safety rules.",
		Version:         versionString(),
		Writer:          stdout,
		ErrWriter:       stderr,
		HideHelpCommand: true,
		// Errors are printed once, by run, without the help text.
		ExitErrHandler: func(*cli.Context, error) {},
		OnUsageError:   usageError,
		Commands: []*cli.Command{
			versionCommand(),
			synthCommand(),
			fuseCommand(),
			onboardCommand(),
			sampleCommand(),
			tablesCommand(),
			demoCommand(),
			catalogCommand(),
			checkCommand(),
			compareCommand(),
			batchCommand(),
		},
	}
}

// usageError returns a flag error as it is, so that run prints one line
// rather than the whole help.
func usageError(_ *cli.Context, err error, _ bool) error {
	return fmt.Errorf("%w (see --help)", err)
}

func versionString() string {
	return fmt.Sprintf("%s (%s %s/%s)", Version, runtime.Version(), runtime.GOOS, runtime.GOARCH)
}

func versionCommand() *cli.Command {
	return &cli.Command{
		Name:         "version",
		OnUsageError: usageError,
		Usage:        "print scanfold's version and the Go version it was built with",
		Action: func(c *cli.Context) error {
			if c.Args().Len() > 0 {
				return fmt.Errorf("version takes no arguments, got %q", c.Args().First())
			}
			_, err := fmt.Fprintf(c.App.Writer, "scanfold %s\n", versionString())
			return err
		},
	}
}
