// Command stopgap fills the gaps of a remote-driving video feed with labelled
// predicted frames, and replays recorded drives to measure whether that helps.
//
// Usage:
//
//	stopgap demo                              run the built-in demo
//	stopgap simdrive --out DIR                write a simulated drive recording
//	stopgap replay --drive DIR --out DIR      replay a recording and score every gap
//	stopgap relay  [flags]                    run the live relay (see stopgap relay -h)
//	stopgap operator SUBCOMMAND [NAME]        operator profiles (see stopgap operator -h)
//	stopgap import --mcap FILE --out DIR      convert a ROS 2 recording (MCAP)
//	stopgap export --drive DIR --out FILE     write a recording as ROS 2 MCAP
//	stopgap camera --calibration FILE --out camera.json [mount flags]
//
// Run "stopgap COMMAND -h" for a command's flags. This package only parses
// flags and wires the packages together; the logic lives in filter,
// predictor, stream and bench.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"syscall"

	"stopgap/internal/vocab"
)

// safetyCaution is printed by every command that shows or scores predicted
// frames: the one caution text of package vocab, which the report, the
// console and the README carry too.
const safetyCaution = vocab.CautionTitle + ". " + vocab.Caution

type command struct {
	name    string
	summary string
	run     func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

func commands() []command {
	return []command{
		{"demo", "run the built-in demo: live relay and simulated vehicle (--offline: replay and report)", runDemo},
		{"simdrive", "write a simulated drive recording with exact ground truth", runSimdrive},
		{"replay", "replay a recording with recorded or modelled drops and score every gap", runReplay},
		{"tune", "sweep the confidence cutoff over replayed drives and recommend one for a tolerance", runTune},
		{"merge", "join the outputs of replay or tune shards into the report of one run", runMerge},
		{"relay", "run the live relay between the vehicle and the operator console", runRelay},
		{"operator", "operator profiles: list, show (with history), add, set, remove, apply", runOperator},
		{"import", "convert a ROS 2 recording (MCAP) into a recording; --list shows its topics", runImport},
		{"export", "write a recording as a ROS 2 MCAP file for robotics viewers", runExportMCAP},
		{"camera", "write a camera.json from an OpenCV or ROS calibration file and the mount", runCamera},
	}
}

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	os.Exit(run(ctx, os.Args[1:], os.Stdout, os.Stderr))
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	for _, c := range commands() {
		if c.name == args[0] {
			err := c.run(ctx, args[1:], stdout, stderr)
			switch {
			case err == nil:
				return 0
			case errors.Is(err, flag.ErrHelp):
				return 0
			case errors.Is(err, errUsage):
				return 2
			default:
				fmt.Fprintf(stderr, "stopgap %s: %v\n", c.name, err)
				return 1
			}
		}
	}
	fmt.Fprintf(stderr, "stopgap: unknown command %q\n\n", args[0])
	usage(stderr)
	return 2
}

// errUsage marks an error already reported by a FlagSet.
var errUsage = errors.New("usage")

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: stopgap COMMAND [flags]")
	fmt.Fprintln(w)
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-9s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, `Run "stopgap COMMAND -h" for its flags.`)
	fmt.Fprintln(w)
	fmt.Fprintln(w, safetyCaution)
}

// parse parses args into fs, mapping flag errors to errUsage.
func parse(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return errUsage
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(fs.Output(), "stopgap %s: unexpected argument %q\n", fs.Name(), fs.Arg(0))
		return errUsage
	}
	return nil
}

func newLogger(w io.Writer, jsonLogs bool, level slog.Level) *slog.Logger {
	opts := &slog.HandlerOptions{Level: level}
	if jsonLogs {
		return slog.New(slog.NewJSONHandler(w, opts))
	}
	return slog.New(slog.NewTextHandler(w, opts))
}
