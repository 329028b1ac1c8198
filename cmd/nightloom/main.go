// Command nightloom is the nightloom client: it drives a nightloomd daemon
// over gRPC and offers offline commands that expose the ephemeris engine.
//
//	nightloom sky   --site LAT,LON[,ELEV_M] --at RFC3339 [--ra DEG --dec DEG | --orbit FILE.json] [--json]
//	nightloom night --site LAT,LON[,ELEV_M] --date YYYY-MM-DD [--tz ZONE] [--json]
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
)

// usageError is a mistake in the command line; it exits with status 2.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

// flagError names the flag at fault.
func flagError(flag, format string, args ...any) error {
	return &usageError{fmt.Sprintf("flag --%s: %s", flag, fmt.Sprintf(format, args...))}
}

type command struct {
	name    string
	summary string
	run     func(args []string, stdout, stderr io.Writer) error
}

func commands() []command {
	return []command{
		{"sky", "positions of the Sun, the Moon and a target from a site at an instant (offline)", runSky},
		{"night", "sunset, twilights, sunrise, moonrise and moonset for a site and date (offline)", runNight},
	}
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run executes one command line and returns the process exit status.
func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	for _, c := range commands() {
		if c.name == args[0] {
			err := c.run(args[1:], stdout, stderr)
			if err == nil || errors.Is(err, flag.ErrHelp) {
				return 0
			}
			fmt.Fprintf(stderr, "nightloom %s: %v\n", c.name, err)
			var ue *usageError
			if errors.As(err, &ue) {
				return 2
			}
			return 1
		}
	}
	fmt.Fprintf(stderr, "nightloom: unknown command %q\n", args[0])
	usage(stderr)
	return 2
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: nightloom COMMAND [flags]\n\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun 'nightloom COMMAND -h' for a command's flags.")
}
