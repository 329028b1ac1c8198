package main

// Every client command against a real daemon with a token of each role: the
// roles that README's "Commands by role" table allows succeed, the others
// are refused with PERMISSION_DENIED (exit 1) and change nothing that the
// command shows. The table below is that README table, written out; it is
// the specification, independent of the server's method table.

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/server"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Roles by name, in the README table's column order.
const (
	rViewer    = "viewer"
	rTelescope = "telescope"
	rOperator  = "operator"
	rAdmin     = "admin"
)

var allRoles = []string{rViewer, rTelescope, rOperator, rAdmin}

// commandRoles is README's table "Commands by role".
var commandRoles = map[string][]string{
	"site create": {rAdmin}, "site get": {rViewer, rTelescope, rOperator, rAdmin}, "site list": {rViewer, rOperator, rAdmin},
	"site update": {rAdmin}, "site delete": {rAdmin},
	"target create": {rAdmin}, "target get": allRoles, "target list": allRoles, "target update": {rAdmin}, "target delete": {rAdmin},
	"block queue": {rOperator, rAdmin}, "block update": {rOperator, rAdmin}, "block get": allRoles, "block list": allRoles, "block withdraw": {rOperator, rAdmin},
	"plan make": {rOperator, rAdmin}, "plan show": allRoles, "plan list": allRoles, "plan replan": {rTelescope, rOperator, rAdmin},
	"plan next": allRoles, "plan watch": allRoles, "plan chart": allRoles, "plan export": allRoles,
	"progress report": {rTelescope, rOperator, rAdmin},
	"ephemeris":       {rViewer, rOperator, rAdmin}, "visibility": {rViewer, rOperator, rAdmin}, "events": {rViewer, rOperator, rAdmin},
	"target import":   {rAdmin},
	"comet magnitude": {rTelescope, rOperator, rAdmin}, "comet refit": {rOperator, rAdmin}, "comet history": {rViewer, rOperator, rAdmin},
	"outlook":        {rViewer, rOperator, rAdmin},
	"program create": {rAdmin}, "program update": {rAdmin}, "program delete": {rAdmin},
	"program show": {rViewer, rOperator, rAdmin}, "program list": {rViewer, rOperator, rAdmin}, "program usage": {rViewer, rOperator, rAdmin},
	"network create": {rAdmin}, "network list": allRoles, "network show": allRoles, "network delete": {rAdmin},
	"network replan": {rTelescope, rOperator, rAdmin},
}

func TestCommandsByRole(t *testing.T) {
	ctx := context.Background()
	clk := &simClock{}
	srv, err := server.Start(ctx, server.Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(t.TempDir(), "roles.db"),
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil)), Now: clk.Now, ReplanPriority: -1})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(context.Background()) })
	tokens := map[string]string{}
	for _, r := range allRoles {
		role, _ := server.ParseRole(r)
		if tokens[r], _, err = srv.CreateToken(ctx, role, "role test "+r); err != nil {
			t.Fatal(err)
		}
	}
	d := &testDaemon{addr: srv.Addr().String(), admin: tokens[rAdmin], viewer: tokens[rViewer], clock: clk}
	as := func(role string, args ...string) result {
		return runBinary(t, []string{envServer + "=" + d.addr, envToken + "=" + tokens[role]}, args...)
	}
	site, targets, _ := loadScenario(t, d)
	sid := site.GetId()
	cometID := ""
	for _, tg := range targets {
		if strings.HasPrefix(tg.GetName(), "Comet NL-1") {
			cometID = tg.GetId()
		}
	}
	var elementsLine string
	for _, l := range strings.Split(mustRead(t, demoFile("comet-elements.txt")), "\n") {
		if strings.Contains(l, "Comet NL-1") {
			elementsLine = l
		}
	}
	var mk pb.MakePlanResponse
	parse(t, d.cli(t, "plan", "make", "--site", sid, "--night", "2027-01-14", "--budget", "200ms", "--seed", "3", "--json").ok(t, "plan make").stdout, &mk)
	plan := mk.GetPlans()[0]
	runs := plan.GetAssignments()
	clk.Set(plan.GetInterval().GetEnd().AsTime().Add(time.Hour))
	dir := t.TempDir()

	// Fresh things for the commands that use one up.
	var raw struct {
		Blocks []json.RawMessage `json:"blocks"`
	}
	b, _ := os.ReadFile(demoFile("blocks.json"))
	if err := json.Unmarshal(b, &raw); err != nil {
		t.Fatal(err)
	}
	oneBlock := filepath.Join(dir, "one-block.json")
	if err := os.WriteFile(oneBlock, []byte(`{"blocks":[`+string(raw.Blocks[0])+`]}`), 0o600); err != nil {
		t.Fatal(err)
	}
	n := 0
	freshSite := func() string {
		var r pb.CreateSiteResponse
		parse(t, d.cli(t, "site", "create", "--file", demoFile("site.json"), "--json").ok(t, "fresh site").stdout, &r)
		return r.GetSite().GetId()
	}
	freshTarget := func() string {
		n++
		var r pb.CreateTargetResponse
		parse(t, d.cli(t, "target", "create", "--name", fmt.Sprintf("NLD %d", 9000+n), "--ra", "10.5", "--dec", "41.2", "--json").ok(t, "fresh target").stdout, &r)
		return r.GetTarget().GetId()
	}
	freshBlock := func() string {
		var r pb.QueueBlocksResponse
		parse(t, d.cli(t, "block", "queue", "--file", oneBlock, "--site", sid, "--json").ok(t, "fresh block").stdout, &r)
		return r.GetBlocks()[0].GetId()
	}
	freshProgram := func() string {
		n++
		name := fmt.Sprintf("share-%d", n)
		d.cli(t, "program", "create", "--name", name, "--allocation", "10h", "--period", "month").ok(t, "fresh program")
		return name
	}
	shared := freshProgram()
	reportRun := map[string]int{rTelescope: 1, rOperator: 2, rAdmin: 3, rViewer: 4}
	// A network of a fresh site with a plan of its night, for the network
	// commands.
	netSite := freshSite()
	d.cli(t, "network", "create", "--name", "Role Network", "--sites", netSite).ok(t, "network create")
	d.cli(t, "plan", "make", "--network", "Role Network", "--night", "2027-01-14", "--budget", "100ms").ok(t, "plan make --network")
	freshNetwork := func() string {
		n++
		name := fmt.Sprintf("Role Network %d", n)
		d.cli(t, "network", "create", "--name", name, "--sites", netSite).ok(t, "fresh network")
		return name
	}
	commands := map[string]func(role string) []string{
		"site create": func(string) []string { return []string{"site", "create", "--file", demoFile("site.json")} },
		"site get":    func(string) []string { return []string{"site", "get", "--site", sid} },
		"site list":   func(string) []string { return []string{"site", "list"} },
		"site update": func(string) []string {
			return []string{"site", "update", "--file", demoFile("update-site.json"), "--site", freshSite()}
		},
		"site delete": func(string) []string { return []string{"site", "delete", "--site", freshSite()} },
		"target create": func(r string) []string {
			return []string{"target", "create", "--name", "NLD role " + r, "--ra", "1", "--dec", "2"}
		},
		"target get":  func(string) []string { return []string{"target", "get", "--target", targets[0].GetId()} },
		"target list": func(string) []string { return []string{"target", "list"} },
		"target update": func(string) []string {
			return []string{"target", "update", "--file", demoFile("update-target.json"), "--target", freshTarget()}
		},
		"target delete": func(string) []string { return []string{"target", "delete", "--target", freshTarget()} },
		"block queue":   func(string) []string { return []string{"block", "queue", "--file", oneBlock, "--site", sid} },
		"block get":     func(string) []string { return []string{"block", "get", "--block", runs[0].GetBlockId()} },
		"block list":    func(string) []string { return []string{"block", "list", "--site", sid} },
		"block withdraw": func(string) []string {
			return []string{"block", "withdraw", "--block", freshBlock(), "--reason", "role test"}
		},
		"plan make": func(string) []string {
			return []string{"plan", "make", "--site", sid, "--night", "2027-01-15", "--budget", "100ms"}
		},
		"block update": func(string) []string { return []string{"block", "update", "--block", freshBlock(), "--priority", "3"} },
		"plan export": func(r string) []string {
			return []string{"plan", "export", "--plan", plan.GetId(), "--out", filepath.Join(dir, r+".ics")}
		},
		"plan show": func(string) []string { return []string{"plan", "show", "--plan", plan.GetId()} },
		"plan list": func(string) []string { return []string{"plan", "list", "--site", sid} },
		"plan replan": func(string) []string {
			from := plan.GetInterval().GetStart().AsTime().Add(5 * time.Hour).UTC().Truncate(time.Minute).Format(time.RFC3339)
			return []string{"plan", "replan", "--site", sid, "--from", from, "--budget", "100ms"}
		},
		"plan next": func(string) []string {
			return []string{"plan", "next", "--site", sid, "--now", runs[0].GetPrepareStart().AsTime().Format(time.RFC3339)}
		},
		"plan watch": func(string) []string { return []string{"plan", "watch", "--site", sid, "--current", "--count", "1"} },
		"plan chart": func(r string) []string {
			return []string{"plan", "chart", "--plan", plan.GetId(), "--out", filepath.Join(dir, r+".png")}
		},
		"progress report": func(r string) []string {
			a := runs[reportRun[r]]
			return []string{"progress", "report", "--block", a.GetBlockId(), "--frames", "1", "--report-id", "role-" + r,
				"--start", a.GetStart().AsTime().Format(time.RFC3339), "--end", a.GetEnd().AsTime().Format(time.RFC3339)}
		},
		"ephemeris": func(string) []string {
			return []string{"ephemeris", "--file", demoFile("ephemeris.json"), "--site", sid}
		},
		"visibility": func(string) []string {
			return []string{"visibility", "--file", demoFile("visibility.json"), "--site", sid}
		},
		"events": func(string) []string { return []string{"events", "--site", sid, "--date", "2027-01-14"} },
		"target import": func(r string) []string {
			// The demo's comet line under another name and designation
			// (target names are unique).
			line := strings.Replace(strings.Replace(elementsLine, "Comet NL-1 (invented)", "Comet NL-9 (invented)", 1), "CK26Y070", "CK26Y090", 1)
			f := filepath.Join(dir, "import-"+r+".txt")
			if err := os.WriteFile(f, []byte(line+"\n"), 0o600); err != nil {
				t.Fatal(err)
			}
			return []string{"target", "import", "--elements", f, "--request-id", "role-import-" + r}
		},
		"comet magnitude": func(r string) []string {
			at := fmt.Sprintf("2027-01-%02dT06:00:00Z", 10+reportRun[r])
			return []string{"comet", "magnitude", "--target", cometID, "--at", at, "--mag", fmt.Sprint(5 + reportRun[r]), "--sigma-mag", "0.2"}
		},
		"program create": func(r string) []string {
			return []string{"program", "create", "--name", "club-" + r, "--allocation", "4h", "--period", "fixed", "--from", "2027-01-01", "--to", "2027-07-01"}
		},
		"program update": func(string) []string {
			return []string{"program", "update", "--name", freshProgram(), "--allocation", "6h"}
		},
		"program delete": func(string) []string { return []string{"program", "delete", "--name", freshProgram()} },
		"program show":   func(string) []string { return []string{"program", "show", "--name", shared} },
		"program list":   func(string) []string { return []string{"program", "list"} },
		"program usage":  func(string) []string { return []string{"program", "usage", "--at", "2027-01-15"} },
		"comet refit":    func(string) []string { return []string{"comet", "refit", "--target", cometID} },
		"comet history":  func(string) []string { return []string{"comet", "history", "--target", cometID} },
		"network create": func(r string) []string {
			return []string{"network", "create", "--name", "Role Created " + r, "--sites", sid}
		},
		"network list":   func(string) []string { return []string{"network", "list"} },
		"network show":   func(string) []string { return []string{"network", "show", "--network", "Role Network"} },
		"network delete": func(string) []string { return []string{"network", "delete", "--network", freshNetwork()} },
		"network replan": func(string) []string {
			from := plan.GetInterval().GetStart().AsTime().Add(5 * time.Hour).UTC().Truncate(time.Minute).Format(time.RFC3339)
			return []string{"network", "replan", "--network", "Role Network", "--from", from, "--budget", "100ms"}
		},
		"outlook": func(string) []string {
			return []string{"outlook", "--site", sid, "--target", cometID, "--from", "2027-01-14", "--nights", "2"}
		},
	}
	// Every command of the client has a row (groups list their verbs).
	for _, c := range commandsOfClient() {
		if _, ok := commandRoles[c]; !ok {
			t.Errorf("command %q has no row in the roles table", c)
		}
		if _, ok := commands[c]; !ok {
			t.Errorf("command %q has no invocation in this test", c)
		}
	}
	allowed, refused := 0, 0
	for _, c := range slices.Sorted(maps.Keys(commands)) {
		for _, role := range allRoles {
			args := commands[c](role)
			r := as(role, args...)
			switch {
			case slices.Contains(commandRoles[c], role):
				allowed++
				if r.code != 0 {
					t.Errorf("%s as %s: exit %d, want 0\n%s", c, role, r.code, r.stderr)
				}
			default:
				refused++
				if r.code != 1 || !strings.Contains(r.stderr, "PERMISSION_DENIED") {
					t.Errorf("%s as %s: exit %d, want 1 with PERMISSION_DENIED\n%s", c, role, r.code, r.stderr)
				}
			}
		}
	}
	t.Logf("%d commands x %d roles: %d allowed runs succeeded, %d refused", len(commands), len(allRoles), allowed, refused)
}

// commandsOfClient lists the client's commands that talk to a daemon, as
// "group verb" or "command".
func commandsOfClient() []string {
	var out []string
	for _, c := range commands() {
		switch c.name {
		case "sky", "night", "demo", "catalogue":
			continue // offline
		}
		if len(c.sub) == 0 {
			out = append(out, c.name)
			continue
		}
		for _, s := range c.sub {
			out = append(out, c.name+" "+s.name)
		}
	}
	return out
}
