package main

import (
	"strings"
	"testing"
)

// TestHelpOnEveryCommand: `nightloom help GROUP VERB` (and `help COMMAND`)
// prints the summary and the flags of every command, offline ones too.
func TestHelpOnEveryCommand(t *testing.T) {
	for _, c := range commands() {
		paths := [][]string{{c.name}}
		if len(c.sub) > 0 {
			paths = nil
			for _, s := range c.sub {
				paths = append(paths, []string{c.name, s.name})
			}
		}
		for _, p := range paths {
			out, errs, code := runCLI(t, append([]string{"help"}, p...)...)
			if code != 0 || !strings.Contains(out, "flags:") || !strings.Contains(out, "  -") {
				t.Errorf("help %v: exit %d\n%s%s", p, code, out, errs)
			}
		}
	}
}

// TestShellCompletion: the cobra tree completes subcommands and each
// command's flags (the shared connection flags included), and prints
// completion scripts.
func TestShellCompletion(t *testing.T) {
	cases := []struct {
		args []string
		want []string
	}{
		{[]string{"__complete", "pl"}, []string{"plan"}},
		{[]string{"__complete", "plan", "ma"}, []string{"make"}},
		{[]string{"__complete", "plan", "make", "--bu"}, []string{"--budget"}},
		{[]string{"__complete", "site", "get", "--tls"}, []string{"--tls-ca", "--tls-cert", "--tls-key"}},
		{[]string{"__complete", "block", ""}, []string{"queue", "update", "withdraw"}},
	}
	for _, c := range cases {
		out, errs, code := runCLI(t, c.args...)
		for _, w := range c.want {
			if code != 0 || !strings.Contains(out, w) {
				t.Errorf("%v: exit %d, no %q in\n%s%s", c.args, code, w, out, errs)
			}
		}
	}
	for _, sh := range []string{"bash", "zsh", "fish", "powershell"} {
		out, _, code := runCLI(t, "completion", sh)
		if code != 0 || !strings.Contains(out, "nightloom") || len(out) < 500 {
			t.Errorf("completion %s: exit %d, %d bytes", sh, code, len(out))
		}
	}
}
