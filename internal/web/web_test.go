package web

import (
	"bufio"
	"context"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/server"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// liveDeadline is the bound on how soon an open page shows a new
// plan version or a progress report.
const liveDeadline = 2 * time.Second

var rowRE = regexp.MustCompile(`<tr class="[^"]*" data-block="([^"]+)" data-start="([^"]+)" data-end="([^"]+)" data-frames="(\d+)">`)

// planRows are the plan table's rows as block|start|end|frames.
func planRows(body string) []string {
	var out []string
	for _, m := range rowRE.FindAllStringSubmatch(body, -1) {
		out = append(out, m[1]+"|"+m[2]+"|"+m[3]+"|"+m[4])
	}
	return out
}

// wantRows are GetPlan's assignments in the same form.
func wantRows(p *pb.Plan) []string {
	var out []string
	for _, a := range p.GetAssignments() {
		out = append(out, a.GetBlockId()+"|"+a.GetStart().AsTime().UTC().Format(time.RFC3339)+"|"+
			a.GetEnd().AsTime().UTC().Format(time.RFC3339)+"|"+itoa(a.GetFrames()))
	}
	return out
}

func itoa(n int32) string { return strconv.Itoa(int(n)) }

// httptestServer serves h on a loopback port for the test.
func httptestServer(t *testing.T, h http.Handler) string {
	s := httptest.NewServer(h)
	t.Cleanup(s.Close)
	return s.URL
}

func get(t *testing.T, c *http.Client, u string) (*http.Response, string) {
	t.Helper()
	resp, err := c.Get(u)
	if err != nil {
		t.Fatal(err)
	}
	return resp, readAll(t, resp)
}

func TestSignInAndNightPage(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	c := e.client()
	resp := e.signIn(c, e.viewer)
	if resp.StatusCode != http.StatusSeeOther || resp.Header.Get("Location") != "/" {
		t.Fatalf("sign-in: got %d to %q, want 303 to /", resp.StatusCode, resp.Header.Get("Location"))
	}
	// The session cookie's flags (plain HTTP here: not Secure).
	var sc *http.Cookie
	for _, ck := range resp.Cookies() {
		if ck.Name == sessionCookie {
			sc = ck
		}
	}
	if sc == nil || !sc.HttpOnly || sc.SameSite != http.SameSiteStrictMode || sc.Path != "/" || sc.MaxAge <= 0 ||
		sc.MaxAge > int(DefaultSessionTTL/time.Second) || sc.Secure {
		t.Fatalf("session cookie %+v: want HttpOnly, SameSite=Strict, Path=/, 0 < MaxAge <= %v, not Secure over HTTP", sc, DefaultSessionTTL)
	}
	if strings.Contains(sc.Value, e.viewer) || len(sc.Value) < 40 {
		t.Fatalf("session cookie value is not a random id")
	}

	_, body := get(t, c, e.http.URL+"/")
	if !strings.Contains(body, e.site.GetName()) || !strings.Contains(body, "/sites/"+e.site.GetId()) {
		t.Fatalf("sites page does not list the site:\n%s", body)
	}

	gp, err := pb.NewPlanServiceClient(e.conn).GetPlan(e.ctx(e.admin), &pb.GetPlanRequest{PlanId: e.plan.GetId()})
	if err != nil {
		t.Fatal(err)
	}
	// The page marks the run in progress: put the clock inside the first
	// run that has not ended at demoNight (the plan decides where its gaps
	// fall).
	for _, a := range gp.GetPlan().GetAssignments() {
		if st, en := a.GetStart().AsTime(), a.GetEnd().AsTime(); en.After(demoNight) {
			if st.After(demoNight) {
				e.clock.Set(st.Add(en.Sub(st) / 2))
			}
			break
		}
	}
	resp, body = get(t, c, e.http.URL+"/sites/"+e.site.GetId())
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("night page: %d\n%s", resp.StatusCode, body)
	}
	got, want := planRows(body), wantRows(gp.GetPlan())
	if len(want) == 0 || strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Fatalf("plan table rows differ from GetPlan:\ngot  %q\nwant %q", got, want)
	}
	for _, s := range []string{`<svg class="chart"`, "sunset", "moonset", "Unplaced blocks", `data-version="1"`,
		"night of <b>2027-01-14</b> (tonight)", `class="now"`, "countdown"} {
		if !strings.Contains(body, s) {
			t.Errorf("night page lacks %q", s)
		}
	}
	if n := strings.Count(body, `<tr data-block=`); n != len(gp.GetPlan().GetUnplaced()) {
		t.Errorf("unplaced rows: got %d, want %d", n, len(gp.GetPlan().GetUnplaced()))
	}
	// The fragment is the same content without the layout.
	_, frag := get(t, c, e.http.URL+"/sites/"+e.site.GetId()+"?fragment=1")
	if strings.Contains(frag, "<html") || strings.Join(planRows(frag), "\n") != strings.Join(want, "\n") {
		t.Fatalf("fragment: layout present or rows differ")
	}
	// Another night: no plan.
	_, body = get(t, c, e.http.URL+"/sites/"+e.site.GetId()+"?date=2027-01-20")
	if !strings.Contains(body, "No plan for this night") {
		t.Errorf("night without a plan: no 'No plan' message")
	}
	resp, _ = get(t, c, e.http.URL+"/sites/"+e.site.GetId()+"?date=2027-13-01")
	if resp.StatusCode != http.StatusBadRequest {
		t.Errorf("bad date: got %d, want 400", resp.StatusCode)
	}
	resp, _ = get(t, c, e.http.URL+"/sites/site-nope")
	if resp.StatusCode != http.StatusNotFound {
		t.Errorf("unknown site: got %d, want 404", resp.StatusCode)
	}

	// The block page of the first run.
	a := gp.GetPlan().GetAssignments()[0]
	resp, body = get(t, c, e.http.URL+"/blocks/"+a.GetBlockId())
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("block page: %d\n%s", resp.StatusCode, body)
	}
	for _, s := range []string{"Runs over all nights", "2027-01-14", "Visibility, night of 2027-01-14", `id="block-progress"`,
		`data-live="/sites/` + e.site.GetId() + `/events"`} {
		if !strings.Contains(body, s) {
			t.Errorf("block page lacks %q", s)
		}
	}
	if !strings.Contains(body, "<table class=\"windows\">") {
		t.Errorf("block page shows no visibility window for a planned block")
	}
}

func TestSignInRefused(t *testing.T) {
	e := newEnv(t)
	c := e.client()
	held, _, err := server.CreateTokenSpec(t.Context(), e.srv.Storage(), server.TokenSpec{Role: server.RoleViewer, SiteID: "site-elsewhere"})
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name, token string
		want        int
	}{
		{"unknown token", "nlt_" + strings.Repeat("A", 43), http.StatusUnauthorized},
		{"empty", "", http.StatusUnauthorized},
		{"too long", strings.Repeat("x", 600), http.StatusUnauthorized},
		{"telescope role", e.tele, http.StatusForbidden},
		{"token held to one site", held, http.StatusForbidden},
	} {
		resp := e.signIn(c, tc.token)
		body := readAll(t, resp)
		if resp.StatusCode != tc.want {
			t.Errorf("%s: got %d, want %d", tc.name, resp.StatusCode, tc.want)
		}
		if strings.Contains(body, tc.token) && tc.token != "" {
			t.Errorf("%s: the page echoes the token", tc.name)
		}
		for _, ck := range resp.Cookies() {
			if ck.Name == sessionCookie && ck.Value != "" {
				t.Errorf("%s: a session cookie was set", tc.name)
			}
		}
	}
}

func TestNeedsSignIn(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	c := e.client()
	for _, p := range []string{"/", "/sites/" + e.site.GetId(), "/blocks/" + e.plan.GetAssignments()[0].GetBlockId()} {
		resp, _ := get(t, c, e.http.URL+p)
		if resp.StatusCode != http.StatusSeeOther || !strings.HasPrefix(resp.Header.Get("Location"), "/signin?next=") {
			t.Errorf("%s without a session: got %d to %q, want 303 to /signin", p, resp.StatusCode, resp.Header.Get("Location"))
		}
	}
	for _, p := range []string{"/sites/" + e.site.GetId() + "?fragment=1", "/sites/" + e.site.GetId() + "/events"} {
		resp, _ := get(t, c, e.http.URL+p)
		if resp.StatusCode != http.StatusUnauthorized {
			t.Errorf("%s without a session: got %d, want 401", p, resp.StatusCode)
		}
	}
	// A forged session id is no session.
	req, _ := http.NewRequest("GET", e.http.URL+"/", nil)
	req.AddCookie(&http.Cookie{Name: sessionCookie, Value: randomID()})
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusSeeOther {
		t.Errorf("forged session: got %d, want 303", resp.StatusCode)
	}
}

func TestRevokedAndExpiredSessions(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)

	c := e.client()
	e.signIn(c, e.viewer).Body.Close()
	if resp, _ := get(t, c, e.http.URL+"/"); resp.StatusCode != http.StatusOK {
		t.Fatalf("signed in: got %d", resp.StatusCode)
	}
	// Expired: the clock passes the session's lifetime.
	e.clock.Set(demoNight.Add(DefaultSessionTTL + time.Second))
	resp, _ := get(t, c, e.http.URL+"/")
	if resp.StatusCode != http.StatusSeeOther || !strings.HasPrefix(resp.Header.Get("Location"), "/signin") {
		t.Fatalf("expired session: got %d to %q, want 303 to /signin", resp.StatusCode, resp.Header.Get("Location"))
	}
	e.clock.Set(demoNight)

	// Revoked: the token is revoked while the session lives.
	c = e.client()
	e.signIn(c, e.viewer).Body.Close()
	if _, err := e.db.RevokeToken(context.Background(), e.viewerID); err != nil {
		t.Fatal(err)
	}
	resp, _ = get(t, c, e.http.URL+"/sites/"+e.site.GetId())
	if resp.StatusCode != http.StatusSeeOther || !strings.HasPrefix(resp.Header.Get("Location"), "/signin") {
		t.Fatalf("revoked token: got %d to %q, want 303 to /signin", resp.StatusCode, resp.Header.Get("Location"))
	}
	if resp := e.signIn(e.client(), e.viewer); resp.StatusCode != http.StatusUnauthorized {
		t.Fatalf("sign-in with a revoked token: got %d, want 401", resp.StatusCode)
	}
}

func TestCSRF(t *testing.T) {
	e := newEnv(t)
	c := e.client()
	// Sign-in without the form's value, or with another's.
	resp, err := c.PostForm(e.http.URL+"/signin", map[string][]string{"token": {e.viewer}})
	if err != nil {
		t.Fatal(err)
	}
	if resp.StatusCode != http.StatusForbidden {
		t.Errorf("sign-in without CSRF value: got %d, want 403", resp.StatusCode)
	}
	resp.Body.Close()
	get(t, c, e.http.URL+"/signin") // a CSRF cookie of its own
	resp, err = c.PostForm(e.http.URL+"/signin", map[string][]string{"token": {e.viewer}, "csrf": {randomID()}})
	if err != nil {
		t.Fatal(err)
	}
	if resp.StatusCode != http.StatusForbidden {
		t.Errorf("sign-in with a wrong CSRF value: got %d, want 403", resp.StatusCode)
	}
	resp.Body.Close()

	// Sign-out needs the session's value and the same origin.
	if resp := e.signIn(c, e.viewer); resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-in: %d", resp.StatusCode)
	}
	resp, err = c.PostForm(e.http.URL+"/signout", map[string][]string{"csrf": {"nope"}})
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusForbidden {
		t.Errorf("sign-out without CSRF value: got %d, want 403", resp.StatusCode)
	}
	_, body := get(t, c, e.http.URL+"/")
	csrf := between(body, `name="csrf" value="`, `"`)
	req, _ := http.NewRequest("POST", e.http.URL+"/signout", strings.NewReader("csrf="+csrf))
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	req.Header.Set("Origin", "https://evil.example")
	resp, err = c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusForbidden {
		t.Errorf("sign-out from a foreign origin: got %d, want 403", resp.StatusCode)
	}
	resp, err = c.PostForm(e.http.URL+"/signout", map[string][]string{"csrf": {csrf}})
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-out: got %d, want 303", resp.StatusCode)
	}
	if resp, _ := get(t, c, e.http.URL+"/"); resp.StatusCode != http.StatusSeeOther {
		t.Errorf("after sign-out: got %d, want 303 to sign-in", resp.StatusCode)
	}
}

// TestReadOnly: no route accepts a method that could change something,
// and no page holds a form but sign-out's.
func TestReadOnly(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	c := e.client()
	e.signIn(c, e.viewer).Body.Close()
	block := e.plan.GetAssignments()[0].GetBlockId()
	paths := []string{"/", "/sites/" + e.site.GetId(), "/sites/" + e.site.GetId() + "/events", "/blocks/" + block,
		"/healthz", "/static/style.css", "/sites/" + e.site.GetId() + "/plan", "/blocks/" + block + "/withdraw"}
	for _, p := range paths {
		for _, m := range []string{"POST", "PUT", "PATCH", "DELETE"} {
			req, _ := http.NewRequest(m, e.http.URL+p, strings.NewReader("x=1"))
			req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
			resp, err := c.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if resp.StatusCode != http.StatusMethodNotAllowed && resp.StatusCode != http.StatusNotFound {
				t.Errorf("%s %s: got %d, want 405 or 404", m, p, resp.StatusCode)
			}
		}
	}
	for _, p := range paths[:4] {
		if strings.HasSuffix(p, "/events") {
			continue
		}
		_, body := get(t, c, e.http.URL+p)
		forms := regexp.MustCompile(`<form [^>]*action="([^"]*)"`).FindAllStringSubmatch(body, -1)
		for _, f := range forms {
			if f[1] != "/signout" {
				t.Errorf("%s holds a form posting to %q", p, f[1])
			}
		}
	}
	// The queue is as it was.
	b, err := pb.NewQueueServiceClient(e.conn).GetBlock(e.ctx(e.admin), &pb.GetBlockRequest{BlockId: block})
	if err != nil || b.GetBlock().GetState() != pb.BlockState_BLOCK_STATE_OPEN {
		t.Fatalf("block after the attempts: %v, %v", b.GetBlock().GetState(), err)
	}
}

// TestTemplatesEscape: user-supplied strings (a target's name) are text on
// every page, in the table and in the chart.
func TestTemplatesEscape(t *testing.T) {
	const evil = `<script>alert(1)</script>`
	e := newEnv(t)
	e.loadDemo(map[string]string{"NLD 12": evil, "NLD 81": `"><img src=x onerror=alert(2)>`})
	c := e.client()
	e.signIn(c, e.viewer).Body.Close()
	_, body := get(t, c, e.http.URL+"/sites/"+e.site.GetId())
	var block string
	for _, a := range e.plan.GetAssignments() {
		if a.GetTargetName() == evil {
			block = a.GetBlockId()
		}
	}
	if block == "" {
		t.Fatalf("the renamed target has no run in the plan")
	}
	_, bpage := get(t, c, e.http.URL+"/blocks/"+block)
	for name, page := range map[string]string{"night": body, "block": bpage} {
		if strings.Contains(page, "<script>alert") || strings.Contains(page, "<img src=x") {
			t.Errorf("%s page holds the target's name as markup", name)
		}
		if !strings.Contains(page, "&lt;script&gt;alert(1)&lt;/script&gt;") {
			t.Errorf("%s page lacks the escaped name", name)
		}
	}
	if n := strings.Count(body, "<script"); n != 1 { // the one script tag of the layout
		t.Errorf("night page has %d <script elements, want 1", n)
	}
}

func TestPublicSite(t *testing.T) {
	var public string
	e := newEnv(t, func(c *Config) { c.PublicSite = "" })
	e.loadDemo(nil)
	public = e.site.GetId()
	h, err := New(Config{Store: e.db, Sky: e.srv.Sky(), Plans: e.srv, Now: e.clock.Now, PublicSite: public})
	if err != nil {
		t.Fatal(err)
	}
	defer h.Close()
	srv := httptestServer(t, h)
	c := e.client()
	resp, body := get(t, c, srv+"/sites/"+public)
	if resp.StatusCode != http.StatusOK || len(planRows(body)) != len(e.plan.GetAssignments()) {
		t.Fatalf("public night page: %d, %d rows", resp.StatusCode, len(planRows(body)))
	}
	if strings.Contains(body, `action="/signout"`) {
		t.Errorf("public page shows a sign-out form without a session")
	}
	for _, p := range []string{"/", "/blocks/" + e.plan.GetAssignments()[0].GetBlockId()} {
		if resp, _ := get(t, c, srv+p); resp.StatusCode != http.StatusSeeOther {
			t.Errorf("%s on a public daemon without a session: got %d, want 303", p, resp.StatusCode)
		}
	}
}

// sseEvent reads the next event name from a stream.
func sseEvents(t *testing.T, resp *http.Response) <-chan string {
	ch := make(chan string, 16)
	go func() {
		defer close(ch)
		sc := bufio.NewScanner(resp.Body)
		for sc.Scan() {
			if name, ok := strings.CutPrefix(sc.Text(), "event: "); ok {
				ch <- name
			}
		}
	}()
	return ch
}

func waitEvent(t *testing.T, ch <-chan string, want string, within time.Duration) time.Duration {
	t.Helper()
	start := time.Now()
	deadline := time.After(within)
	for {
		select {
		case got, ok := <-ch:
			if !ok {
				t.Fatalf("stream ended before %q", want)
			}
			if got == want {
				return time.Since(start)
			}
		case <-deadline:
			t.Fatalf("no %q event within %v", want, within)
		}
	}
}

// TestLiveEvents: a replan through the API and a progress report each
// reach an open stream within 2 s; revoking the token ends it with a
// "signin" event.
func TestLiveEvents(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	c := e.client()
	e.signIn(c, e.viewer).Body.Close()
	c.Timeout = 0
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", e.http.URL+"/sites/"+e.site.GetId()+"/events", nil)
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if ct := resp.Header.Get("Content-Type"); resp.StatusCode != 200 || ct != "text/event-stream" {
		t.Fatalf("events: %d %q", resp.StatusCode, ct)
	}
	evs := sseEvents(t, resp)

	from := demoNight.Add(30 * time.Minute)
	_, err = pb.NewPlanServiceClient(e.conn).Replan(e.ctx(e.admin), &pb.ReplanRequest{SiteId: e.site.GetId(),
		PlanId: e.plan.GetId(), From: timestamppb.New(from),
		Closures: []*pb.Closure{{Interval: &pb.TimeInterval{Start: timestamppb.New(from), End: timestamppb.New(from.Add(40 * time.Minute))}, Reason: "clouds"}}})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("replan reached the stream after %v", waitEvent(t, evs, "change", liveDeadline))

	a := e.plan.GetAssignments()[0]
	_, err = pb.NewQueueServiceClient(e.conn).ReportProgress(e.ctx(e.tele), &pb.ReportProgressRequest{Report: &pb.ProgressReport{
		ReportId: "web-test-1", BlockId: a.GetBlockId(), FramesKept: 3, Interval: &pb.TimeInterval{Start: a.GetStart(), End: a.GetEnd()},
		Outcome: pb.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("progress reached the stream after %v", waitEvent(t, evs, "change", liveDeadline))

	if _, err := e.db.RevokeToken(context.Background(), e.viewerID); err != nil {
		t.Fatal(err)
	}
	waitEvent(t, evs, "signin", liveDeadline)
}

// TestNoSecretsInLogsOrURLs runs the flows and checks that no token secret
// appears in the logs or any Location header.
func TestNoSecretsInLogsOrURLs(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	c := e.client()
	var locations []string
	for _, tok := range []string{e.viewer, e.tele, "nlt_" + strings.Repeat("B", 43)} {
		resp := e.signIn(c, tok)
		locations = append(locations, resp.Header.Get("Location"))
		resp.Body.Close()
	}
	resp, _ := get(t, c, e.http.URL+"/sites/"+e.site.GetId())
	locations = append(locations, resp.Header.Get("Location"))
	logs := e.logs.String()
	if !strings.Contains(logs, "web sign-in") {
		t.Fatalf("the sign-ins were not logged:\n%s", logs)
	}
	for _, tok := range []string{e.viewer, e.tele, e.admin, "nlt_" + strings.Repeat("B", 43)} {
		secret := strings.TrimPrefix(tok, "nlt_")
		if strings.Contains(logs, secret[:16]) {
			t.Errorf("a token's secret is in the logs")
		}
		for _, l := range locations {
			if strings.Contains(l, secret[:16]) {
				t.Errorf("a token's secret is in a redirect: %q", l)
			}
		}
	}
}

func TestHealthAndHeaders(t *testing.T) {
	e := newEnv(t)
	resp, body := get(t, e.client(), e.http.URL+"/healthz")
	if resp.StatusCode != 200 || body != "ok\n" {
		t.Fatalf("healthz: %d %q", resp.StatusCode, body)
	}
	resp, _ = get(t, e.client(), e.http.URL+"/signin")
	for _, h := range []string{"Content-Security-Policy", "X-Content-Type-Options", "X-Frame-Options"} {
		if resp.Header.Get(h) == "" {
			t.Errorf("header %s missing", h)
		}
	}
	if !strings.Contains(resp.Header.Get("Content-Security-Policy"), "script-src 'self'") {
		t.Errorf("CSP allows inline scripts: %q", resp.Header.Get("Content-Security-Policy"))
	}
	if resp.Header.Get("Strict-Transport-Security") != "" {
		t.Errorf("HSTS over plain HTTP")
	}
}

func TestLocalPath(t *testing.T) {
	for in, want := range map[string]string{
		"": "/", "/sites/a?date=2027-01-14": "/sites/a?date=2027-01-14", "//evil.example/": "/",
		"https://evil.example/": "/", "/\\evil.example": "/", "sites": "/",
	} {
		if got := localPath(in); got != want {
			t.Errorf("localPath(%q) = %q, want %q", in, got, want)
		}
	}
}

// TestCookiesUnderTLS: over HTTPS every cookie is Secure and HSTS is sent.
func TestCookiesUnderTLS(t *testing.T) {
	e := newEnv(t)
	srv := httptest.NewTLSServer(e.web)
	t.Cleanup(srv.Close)
	c := srv.Client()
	c.Jar = e.client().Jar
	c.CheckRedirect = func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	resp, body := get(t, c, srv.URL+"/signin")
	if resp.Header.Get("Strict-Transport-Security") == "" {
		t.Errorf("no HSTS header over TLS")
	}
	csrf := between(body, `name="csrf" value="`, `"`)
	resp, err := c.PostForm(srv.URL+"/signin", map[string][]string{"csrf": {csrf}, "token": {e.viewer}})
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-in over TLS: %d", resp.StatusCode)
	}
	var n int
	for _, ck := range resp.Cookies() {
		n++
		if !ck.Secure || !ck.HttpOnly || ck.SameSite != http.SameSiteStrictMode {
			t.Errorf("cookie %s over TLS: Secure %v, HttpOnly %v, SameSite %v", ck.Name, ck.Secure, ck.HttpOnly, ck.SameSite)
		}
	}
	if n == 0 {
		t.Fatalf("no cookies set")
	}
}
