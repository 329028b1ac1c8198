// Command nightloom is the nightloom client: it drives a nightloomd daemon
// over gRPC, offers offline commands that expose the ephemeris engine, and
// runs a self-contained demo night.
//
// Offline (no daemon):
//
//	nightloom sky   --site LAT,LON[,ELEV_M] --at RFC3339 [--ra DEG --dec DEG | --orbit FILE.json | --body NAME | --elements FILE [--designation D]] [--chart FILE.png] [--json]
//	nightloom night --site LAT,LON[,ELEV_M] --date YYYY-MM-DD [--tz ZONE] [--json]
//	nightloom demo  [--out DIR]
//	nightloom catalogue lookup|search|tonight|finder|constellation
//
// Against a daemon (--server host:port, --token, --tls-ca, --tls-cert and
// --tls-key, or the
// environment variables NIGHTLOOM_SERVER and NIGHTLOOM_TOKEN):
//
//	nightloom site     create|get|list|update|delete
//	nightloom target   create|get|list|update|delete
//	nightloom block    queue|get|list|withdraw
//	nightloom plan     make|show|list|replan|next|watch|chart   (make --network NAME: every member site at once)
//	nightloom network  create|list|show|delete|replan
//	nightloom progress report
//	nightloom program  create|show|list|update|delete|usage
//	nightloom ephemeris | visibility | events
//
// Input files are request messages of the API in the canonical protobuf
// JSON mapping (e.g. a CreateSiteRequest for `site create --file`), so a
// file written for the client is also a valid request body for any gRPC
// client; testdata/demo holds an example of each kind. `--json` prints the
// response message in the same mapping.
//
// Exit status: 0 on success, 1 when a call fails or the work cannot be
// done, 2 for a bad command line or an unreadable or invalid input file.
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

// runFunc runs one command with its arguments (the command's own name
// removed).
type runFunc func(args []string, stdout, stderr io.Writer) error

type command struct {
	name    string
	summary string
	run     runFunc
	// sub lists the subcommands of a group such as `plan`; run is then
	// unused.
	sub []command
}

func commands() []command {
	return []command{
		{name: "sky", summary: "positions of the Sun, the Moon and a target from a site at an instant (offline)", run: runSky},
		{name: "night", summary: "sunset, twilights, sunrise, moonrise and moonset for a site and date (offline)", run: runNight},
		{name: "catalogue", summary: "the bundled catalogue: lookup, search, tonight, finder, constellation (offline)", sub: catalogueCommands()},
		{name: "demo", summary: "run a daemon in-process, plan an invented night, chart it, interrupt it and replan", run: runDemo},
		{name: "site", summary: "telescopes at places: create, get, list, update, delete", sub: siteCommands()},
		{name: "target", summary: "fixed, orbit and body targets: create, get, list, update, delete, import", sub: targetCommands()},
		{name: "block", summary: "the queue of imaging blocks: queue, get, list, withdraw", sub: blockCommands()},
		{name: "plan", summary: "plans: make, show, list, replan, next, watch, chart", sub: planCommands()},
		{name: "program", summary: "programs of a shared telescope: create, show, list, update, delete, usage", sub: programCommands()},
		{name: "network", summary: "networks of sites sharing one queue: create, list, show, delete, replan", sub: networkCommands()},
		{name: "comet", summary: "a comet's measured magnitudes: report, refit the magnitude law, history", sub: cometCommands()},
		{name: "progress", summary: "progress reports from the telescope control software: report", sub: progressCommands()},
		{name: "ephemeris", summary: "tabulate a target seen from a site (daemon)", run: runEphemeris},
		{name: "visibility", summary: "when a block or target can be observed in a night, and why not (daemon)", run: runVisibility},
		{name: "events", summary: "the Sun's and Moon's events of a site's night (daemon)", run: runEvents},
		{name: "outlook", summary: "a target night by night over an apparition: windows, best altitude, magnitude (daemon)", run: runOutlook},
	}
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run executes one command line and returns the process exit status.
func run(args []string, stdout, stderr io.Writer) int {
	if cobraEntry(args) {
		root := commandTree(stdout, stderr)
		root.SetArgs(args)
		if err := root.Execute(); err != nil {
			fmt.Fprintf(stderr, "nightloom: %v\n", err)
			return 2
		}
		return 0
	}
	if len(args) == 0 || isHelp(args[0]) {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := find(commands(), args[0])
	if !ok {
		fmt.Fprintf(stderr, "nightloom: unknown command %q\n", args[0])
		usage(stderr)
		return 2
	}
	name, rest := c.name, args[1:]
	if c.sub != nil {
		if len(rest) == 0 || isHelp(rest[0]) {
			groupUsage(stderr, c)
			if len(rest) == 0 {
				return 2
			}
			return 0
		}
		s, ok := find(c.sub, rest[0])
		if !ok {
			fmt.Fprintf(stderr, "nightloom %s: unknown subcommand %q\n", c.name, rest[0])
			groupUsage(stderr, c)
			return 2
		}
		name, rest, c = c.name+" "+s.name, rest[1:], s
	}
	err := c.run(rest, stdout, stderr)
	if err == nil || errors.Is(err, flag.ErrHelp) {
		return 0
	}
	fmt.Fprintf(stderr, "nightloom %s: %v\n", name, err)
	var ue *usageError
	var fe *fileError
	if errors.As(err, &ue) || errors.As(err, &fe) {
		return 2
	}
	return 1
}

func isHelp(s string) bool { return s == "help" || s == "-h" || s == "--help" || s == "-help" }

func find(cs []command, name string) (command, bool) {
	for _, c := range cs {
		if c.name == name {
			return c, true
		}
	}
	return command{}, false
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: nightloom COMMAND [SUBCOMMAND] [flags]\n\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-11s %s\n", c.name, c.summary)
	}
	fmt.Fprintf(w, "\nCommands that talk to a daemon take --server host:port (env %s, default %s),\n", envServer, defaultServer)
	fmt.Fprintf(w, "--token (env %s), --tls-ca FILE, --tls-cert FILE --tls-key FILE (mutual TLS), --timeout and --json.\n", envToken)
	fmt.Fprintln(w, "Run 'nightloom COMMAND -h' (or 'nightloom help COMMAND') for a command's flags;")
	fmt.Fprintln(w, "'nightloom completion bash|zsh|fish|powershell' prints a shell completion script.")
}

func groupUsage(w io.Writer, g command) {
	fmt.Fprintf(w, "usage: nightloom %s SUBCOMMAND [flags]\n\nsubcommands:\n", g.name)
	for _, s := range g.sub {
		fmt.Fprintf(w, "  %-9s %s\n", s.name, s.summary)
	}
	fmt.Fprintf(w, "\nRun 'nightloom %s SUBCOMMAND -h' for its flags.\n", g.name)
}
