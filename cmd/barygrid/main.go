package main

import (
	"barygrid/io/fieldfile"
	"barygrid/io/netcdf"
	"errors"
	"fmt"
	"os"
	"runtime/debug"
	"strings"

	"github.com/urfave/cli/v2"
)

// usageError marks errors in how the command was called (exit status 2).
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func usagef(format string, args ...any) error {
	return usageError{fmt.Errorf(format, args...)}
}

func main() {
	softMemoryLimit(0)
	os.Exit(run(os.Args))
}

// softMemoryLimit asks the garbage collector to keep the process near 1.9
// GiB (unless GOMEMLIMIT says otherwise; batch raises it to its --memory).
// A solve's live data is far less than that at the sizes the project
// measures (32 fields of 512^2: about 1.4 GB), but with the default
// collector pacing the garbage of earlier stages let the process grow past
// 2 GB during a long full-grid stage. Above the limit the collector only
// works harder; nothing fails.
//
// bytes above 1.9 GiB raises the limit (batch's --memory).
func softMemoryLimit(bytes float64) {
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(int64(max(bytes, 19<<30/10)))
	}
}

// run executes the command line and returns the exit status: 0 success,
// 2 usage error, 1 any other failure. It never panics on bad input: every
// error becomes one line on stderr.
func run(args []string) (status int) {
	defer func() {
		if r := recover(); r != nil {
			fmt.Fprintf(os.Stderr, "barygrid: internal error: %v\n", r)
			status = 1
		}
	}()
	app := newApp()
	err := app.Run(args)
	if err == nil {
		return 0
	}
	msg := strings.TrimSpace(err.Error())
	msg = strings.ReplaceAll(msg, "\n", "; ")
	if errors.Is(err, fieldfile.ErrExists) {
		msg += " (use --force to replace it)"
	}
	if errors.Is(err, netcdf.ErrFill) {
		msg += " (--fill-zero reads them as zero)"
	}
	fmt.Fprintf(os.Stderr, "barygrid: %s\n", msg)
	var ue usageError
	if errors.As(err, &ue) {
		return 2
	}
	return 1
}

func newApp() *cli.App {
	return &cli.App{
		Name:  "barygrid",
		Usage: "average 2-D intensity fields by optimal transport",
		Description: "barygrid reads images, NumPy arrays and numeric grids as measures on a grid " +
			"and computes their Wasserstein barycenter, so that shifted or deformed objects " +
			"average to a sharp representative instead of a blurred ghost.",
		HideHelpCommand: true,
		OnUsageError: func(c *cli.Context, err error, isSub bool) error {
			return usageError{err}
		},
		Commands: []*cli.Command{
			inspectCommand(),
			barycenterCommand(),
			gaussCommand(),
			morphCommand(),
			distanceCommand(),
			batchCommand(),
			demoCommand(),
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("no command %q (see barygrid --help)", c.Args().First())
			}
			return cli.ShowAppHelp(c)
		},
	}
}

// usageOnError marks flag-parsing errors of a subcommand as usage errors.
func withUsage(cmd *cli.Command) *cli.Command {
	cmd.OnUsageError = func(c *cli.Context, err error, isSub bool) error {
		return usageError{err}
	}
	return cmd
}
