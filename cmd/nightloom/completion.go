package main

// The command tree on github.com/spf13/cobra, for shell completion and
// `nightloom help COMMAND [SUBCOMMAND]`: one cobra command per entry of
// commands(), whose flags are read from the command's own flag set (each
// command still parses its flags with the standard flag package, so every
// existing name and flag keeps working, and the shared connection flags
// stay in one place, addConnFlags). run() hands `completion`, cobra's
// hidden `__complete` and `help` to this tree and runs everything else as
// before.

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"
)

// cobraEntry reports whether run() passes the command line to the cobra
// tree.
func cobraEntry(args []string) bool {
	return len(args) > 0 && (args[0] == "completion" || args[0] == cobra.ShellCompRequestCmd ||
		args[0] == cobra.ShellCompNoDescRequestCmd || (args[0] == "help" && len(args) > 1))
}

// commandTree builds the cobra tree of the client's commands.
func commandTree(stdout, stderr io.Writer) *cobra.Command {
	root := &cobra.Command{
		Use:           "nightloom",
		Short:         "the nightloom client: plans for robotic telescopes over gRPC, and offline sky commands",
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetOut(stdout)
	root.SetErr(stderr)
	for _, c := range commands() {
		root.AddCommand(cobraCommand(c, "nightloom "+c.name, stdout, stderr))
	}
	return root
}

func cobraCommand(c command, path string, stdout, stderr io.Writer) *cobra.Command {
	cc := &cobra.Command{Use: c.name, Short: c.summary}
	if len(c.sub) > 0 {
		for _, s := range c.sub {
			cc.AddCommand(cobraCommand(s, path+" "+s.name, stdout, stderr))
		}
		return cc
	}
	run := c.run
	cc.DisableFlagParsing = true
	cc.RunE = func(_ *cobra.Command, args []string) error { return run(args, stdout, stderr) }
	// Help shows the command's own flags, as `nightloom ... -h` does.
	cc.SetHelpFunc(func(*cobra.Command, []string) {
		fmt.Fprintf(stdout, "%s: %s\n\nflags:\n%s", path, c.summary, flagUsage(run))
	})
	// Completion offers the command's flags (with their help) after "-".
	cc.ValidArgsFunction = func(_ *cobra.Command, _ []string, toComplete string) ([]cobra.Completion, cobra.ShellCompDirective) {
		if !strings.HasPrefix(toComplete, "-") {
			return nil, cobra.ShellCompDirectiveDefault // file names and values
		}
		var out []cobra.Completion
		for _, f := range flagNames(run) {
			if strings.HasPrefix("--"+f.name, toComplete) {
				out = append(out, cobra.CompletionWithDesc("--"+f.name, f.help))
			}
		}
		return out, cobra.ShellCompDirectiveNoFileComp
	}
	return cc
}

// flagUsage is what the command prints for -h (its flag set's defaults).
func flagUsage(run runFunc) string {
	var out, errb bytes.Buffer
	_ = run([]string{"-h"}, &out, &errb)
	return errb.String()
}

type flagInfo struct{ name, help string }

// flagNames reads the flags of a command from its -h output (lines
// "  -name type" followed by an indented help line, as package flag
// prints them).
func flagNames(run runFunc) []flagInfo {
	var out []flagInfo
	sc := bufio.NewScanner(strings.NewReader(flagUsage(run)))
	for sc.Scan() {
		l := sc.Text()
		switch {
		case strings.HasPrefix(l, "  -"):
			name := strings.Fields(strings.TrimPrefix(l, "  -"))[0]
			out = append(out, flagInfo{name: name})
		case strings.HasPrefix(l, "    \t") && len(out) > 0 && out[len(out)-1].help == "":
			out[len(out)-1].help = strings.TrimSpace(l)
		}
	}
	return out
}
