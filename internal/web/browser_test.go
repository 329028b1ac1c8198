package web

// Browser tests: the pages in headless Chromium (Debian's chromium package),
// driven with github.com/chromedp/chromedp. Locally they skip when chromium
// is missing; under CI=true they fail (internal/testenv).
//
// NIGHTLOOM_WEB_SCREENSHOT=docs/web.png (a path relative to the repository
// root, or absolute) makes TestBrowser write the screenshot of the site page
// that the README shows:
//
//	NIGHTLOOM_WEB_SCREENSHOT=docs/web.png go test ./internal/web -run TestBrowser

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/cdproto/network"
	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/testenv"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// browser starts headless Chromium with a new, empty profile and no
// network beyond loopback needs, and returns a tab's context.
func browser(t *testing.T) context.Context {
	t.Helper()
	exe := testenv.LookPath(t, "chromium", "chromium")
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(exe),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1200, 900),
	}
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelT := chromedp.NewContext(actx)
	ctx, cancelD := context.WithTimeout(ctx, 2*time.Minute)
	t.Cleanup(func() { cancelD(); cancelT(); cancelA() })
	if err := chromedp.Do(ctx); err != nil { // start the browser now
		t.Fatalf("starting chromium: %v", err)
	}
	return ctx
}

func awaitPromise(p *runtime.EvaluateParams) { yes := true; p.AwaitPromise = &yes }

// must returns v, or panics with err (which fails the test with the
// stack): it takes a call's two results directly.
func must[T any](v T, err error) T {
	if err != nil {
		panic(err)
	}
	return v
}

// rowsJS reads the plan table as block|start|end|frames.
const rowsJS = `Array.from(document.querySelectorAll('#plan tbody tr')).map(r =>
	r.dataset.block + '|' + r.dataset.start + '|' + r.dataset.end + '|' + r.dataset.frames)`

// signInBrowser fills the sign-in form.
func signInBrowser(t *testing.T, ctx context.Context, token string) {
	t.Helper()
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	if err := chromedp.Do(sctx,
		chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SendKeys(chromedp.ID("token"), token),
		chromedp.Click(chromedp.ID("signin")),
		chromedp.WaitVisible(chromedp.ID("plan")),
	); err != nil {
		loc, _ := chromedp.Run(ctx, chromedp.Location())
		body, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`document.body ? document.body.innerText.slice(0, 600) : ''`))
		t.Fatalf("sign-in: %v (at %s)\n%s", err, loc, body)
	}
}

// TestBrowser walks the list in one browser: sign-in, the plan
// table against GetPlan, the cookie's flags, that a viewer can change
// nothing, a replan and a progress report reaching the open page within
// 2 s, and a revoked and an expired session sent back to sign-in.
func TestBrowser(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	ctx := browser(t)
	sitePath := "/sites/" + e.site.GetId()

	// Sign-in from the page asked for, and back to it.
	if err := chromedp.Do(ctx, chromedp.Navigate(e.http.URL+sitePath)); err != nil {
		t.Fatal(err)
	}
	loc := must(chromedp.Run(ctx, chromedp.Location()))
	if !strings.Contains(loc, "/signin?next=") {
		t.Fatalf("without a session the site page went to %q, want the sign-in form", loc)
	}
	signInBrowser(t, ctx, e.viewer)
	loc = must(chromedp.Run(ctx, chromedp.Location()))
	if loc != e.http.URL+sitePath {
		t.Fatalf("after sign-in: at %q, want %q", loc, e.http.URL+sitePath)
	}
	if strings.Contains(loc, e.viewer) {
		t.Fatalf("the token is in the URL")
	}

	// The plan table matches GetPlan row for row.
	plans := pb.NewPlanServiceClient(e.conn)
	gp := must(plans.GetPlan(e.ctx(e.viewer), &pb.GetPlanRequest{PlanId: e.plan.GetId()}))
	rows := must(chromedp.Run(ctx, chromedp.Evaluate[[]string](rowsJS)))
	if want := wantRows(gp.GetPlan()); strings.Join(rows, "\n") != strings.Join(want, "\n") {
		t.Fatalf("plan table in the browser differs from GetPlan:\ngot  %q\nwant %q", rows, want)
	}
	t.Logf("plan table: %d rows, equal to GetPlan", len(rows))

	// The countdown follows the server's clock: the next run (the first
	// that starts after 21:30 CET) minus now.
	var next time.Time
	for _, a := range gp.GetPlan().GetAssignments() {
		if st := a.GetStart().AsTime(); st.After(demoNight) && a.GetPrepareStart().AsTime().After(demoNight) {
			next = st
			break
		}
	}
	cd := must(chromedp.Run(ctx, chromedp.Poll[string](`(() => { const c = document.querySelector('.countdown');
		return c && /^\d+h\d\dm$|^\d+m\d\ds$/.test(c.textContent) ? c.textContent : ''; })()`,
		chromedp.WithPollingTimeout(3*time.Second))))
	// The page's clock runs on from its load: allow countdownSlack.
	const countdownSlack = 5 * time.Second
	d, ok := next.Sub(demoNight), false
	for lag := time.Duration(0); lag <= countdownSlack; lag += time.Second {
		ok = ok || cd == fmtCountdown(d-lag)
	}
	if !ok {
		t.Errorf("countdown %q, want %q within %v (next run at %s)", cd, fmtCountdown(d), countdownSlack, next.Format(time.RFC3339))
	}

	// Red night mode: the button tints the page and the browser remembers
	// it (only in this browser: nothing is sent).
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("red")), chromedp.Reload(), chromedp.WaitVisible(chromedp.ID("plan"))); err != nil {
		t.Fatal(err)
	}
	if !must(chromedp.Run(ctx, chromedp.Evaluate[bool](`document.documentElement.classList.contains('red')`))) {
		t.Errorf("red mode is not on after the click and a reload")
	}
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("red"))); err != nil {
		t.Fatal(err)
	}

	// A viewer can change nothing: the only form is sign-out, and every
	// writing method is refused on every page.
	forms := must(chromedp.Run(ctx, chromedp.Evaluate[[]string](
		`Array.from(document.forms).map(f => f.method + ' ' + new URL(f.action).pathname)`)))
	if len(forms) != 1 || forms[0] != "post /signout" {
		t.Errorf("forms on the page: %q, want only the sign-out form", forms)
	}
	block := gp.GetPlan().GetAssignments()[0].GetBlockId()
	statuses := must(chromedp.Run(ctx, chromedp.Evaluate[[]int](`(async () => {
		const out = [];
		for (const p of [location.pathname, '/', '/blocks/`+block+`', location.pathname + '/events'])
			for (const m of ['POST', 'PUT', 'PATCH', 'DELETE'])
				out.push((await fetch(p, {method: m, body: 'x=1'})).status);
		return out;
	})()`, awaitPromise)))
	for i, s := range statuses {
		if s != 405 {
			t.Errorf("writing request %d from the browser: status %d, want 405", i, s)
		}
	}

	// A replan made through the API shows on the open page within 2 s.
	from := demoNight.Add(30 * time.Minute)
	start := time.Now()
	rr := must(plans.Replan(e.ctx(e.admin), &pb.ReplanRequest{SiteId: e.site.GetId(), PlanId: e.plan.GetId(),
		From: timestamppb.New(from), Closures: []*pb.Closure{{Interval: &pb.TimeInterval{Start: timestamppb.New(from),
			End: timestamppb.New(from.Add(40 * time.Minute))}, Reason: "clouds"}}}))
	if _, err := chromedp.Run(ctx, chromedp.Poll[bool](`document.querySelector('#plan') !== null &&
		document.querySelector('#plan').dataset.version === '2'`,
		chromedp.WithPollingTimeout(liveDeadline), chromedp.WithPollingInterval(20*time.Millisecond))); err != nil {
		t.Fatalf("the replan did not show within %v: %v", liveDeadline, err)
	}
	t.Logf("replan on the open page %v after the call started", time.Since(start).Round(time.Millisecond))
	rows = must(chromedp.Run(ctx, chromedp.Evaluate[[]string](rowsJS)))
	if want := wantRows(rr.GetPlan()); strings.Join(rows, "\n") != strings.Join(want, "\n") {
		t.Fatalf("plan table after the replan differs from the replan:\ngot  %q\nwant %q", rows, want)
	}

	// A progress report moves the block's bar within 2 s.
	a := rr.GetPlan().GetAssignments()[0]
	before := must(pb.NewQueueServiceClient(e.conn).GetBlock(e.ctx(e.admin), &pb.GetBlockRequest{BlockId: a.GetBlockId()}))
	kept := min(a.GetFrames(), before.GetBlock().GetFramesWanted()-before.GetBlock().GetFramesDone())
	want := before.GetBlock().GetFramesDone() + kept
	start = time.Now()
	must(pb.NewQueueServiceClient(e.conn).ReportProgress(e.ctx(e.tele), &pb.ReportProgressRequest{Report: &pb.ProgressReport{
		ReportId: "browser-1", BlockId: a.GetBlockId(), FramesKept: kept,
		Interval: &pb.TimeInterval{Start: a.GetStart(), End: a.GetEnd()}, Outcome: pb.ProgressOutcome_PROGRESS_OUTCOME_DONE}}))
	if _, err := chromedp.Run(ctx, chromedp.Poll[bool](`(() => {
		const p = document.querySelector('tr[data-block="`+a.GetBlockId()+`"] progress');
		return p !== null && p.value === `+itoa(want)+`; })()`,
		chromedp.WithPollingTimeout(liveDeadline), chromedp.WithPollingInterval(20*time.Millisecond))); err != nil {
		t.Fatalf("the progress bar did not reach %d within %v: %v", want, liveDeadline, err)
	}
	t.Logf("progress bar moved %v after the report started", time.Since(start).Round(time.Millisecond))

	if out := os.Getenv("NIGHTLOOM_WEB_SCREENSHOT"); out != "" {
		if !filepath.IsAbs(out) {
			out = filepath.Join("..", "..", out)
		}
		png := must(chromedp.Run(ctx, chromedp.FullScreenshot(100)))
		if err := os.WriteFile(out, png, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("screenshot written to %s (%d bytes)", out, len(png))
	}

	// On a phone-sized screen nothing overflows the page sideways (wide
	// tables scroll in their own box).
	if err := chromedp.Do(ctx, chromedp.EmulateViewport(390, 844, chromedp.EmulateMobile)); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{sitePath, "/blocks/" + a.GetBlockId(), "/"} {
		if err := chromedp.Do(ctx, chromedp.Navigate(e.http.URL+p)); err != nil {
			t.Fatal(err)
		}
		// (Against the screen's 390 px: a mobile browser widens its
		// layout viewport, window.innerWidth, to an overflowing page.)
		if over := must(chromedp.Run(ctx, chromedp.Evaluate[int](`document.documentElement.scrollWidth - 390`))); over > 0 {
			t.Errorf("%s on a 390 px wide screen overflows by %d px", p, over)
		}
	}
	if err := chromedp.Do(ctx, chromedp.Navigate(e.http.URL+sitePath), chromedp.WaitVisible(chromedp.ID("plan"))); err != nil {
		t.Fatal(err)
	}

	// The session cookie: HttpOnly (invisible to scripts), SameSite=Strict,
	// a random id.
	cookies := must(chromedp.Call(ctx, network.GetCookies, network.GetCookiesParams{URLs: []string{e.http.URL}}))
	var found bool
	for _, c := range cookies.Cookies {
		if c.Name == sessionCookie {
			found = true
			if !c.HTTPOnly || c.SameSite != network.CookieSameSiteStrict || c.Session || strings.Contains(c.Value, e.viewer) {
				t.Errorf("session cookie in the browser: %+v", c)
			}
		}
	}
	if !found {
		t.Fatalf("no session cookie in the browser")
	}
	if dc := must(chromedp.Run(ctx, chromedp.Evaluate[string](`document.cookie`))); strings.Contains(dc, sessionCookie) {
		t.Errorf("document.cookie shows the session cookie: %q", dc)
	}

	// Revoking the token sends the open page back to sign-in.
	if _, err := e.db.RevokeToken(context.Background(), e.viewerID); err != nil {
		t.Fatal(err)
	}
	// (The page navigates by itself, which a Poll would see as its target
	// going away: look at the location instead.)
	revoked := time.Now()
	for {
		loc, err := chromedp.Run(ctx, chromedp.Location())
		if err == nil && strings.Contains(loc, "/signin") {
			t.Logf("revoked token: the open page went to sign-in after %v", time.Since(revoked).Round(time.Millisecond))
			break
		}
		if time.Since(revoked) > 3*time.Second {
			t.Fatalf("after revocation the page stayed at %q (%v)", loc, err)
		}
		time.Sleep(50 * time.Millisecond)
	}

	// An expired session is sent back to sign-in on reload.
	viewer2, _, err := server.CreateToken(context.Background(), e.db, server.RoleViewer, "second viewer")
	if err != nil {
		t.Fatal(err)
	}
	signInBrowser(t, ctx, viewer2)
	e.clock.Set(demoNight.Add(DefaultSessionTTL + time.Minute))
	if err := chromedp.Do(ctx, chromedp.Reload()); err != nil {
		t.Fatal(err)
	}
	if loc := must(chromedp.Run(ctx, chromedp.Location())); !strings.Contains(loc, "/signin") {
		t.Fatalf("expired session: at %q after reload, want the sign-in form", loc)
	}

	// No token's secret reached the logs (the daemon's and the pages').
	logs := e.logs.String()
	for _, tok := range []string{e.viewer, viewer2, e.admin, e.tele} {
		if strings.Contains(logs, strings.TrimPrefix(tok, "nlt_")[:16]) {
			t.Errorf("a token's secret is in the logs")
		}
	}
}

// TestBrowserEscapes: a target named with markup shows as text and runs no
// script in a real browser.
func TestBrowserEscapes(t *testing.T) {
	const evil = `<script>alert(1)</script>`
	e := newEnv(t)
	e.loadDemo(map[string]string{"NLD 12": evil, "NLD 81": `<img src=x onerror=alert(2)>`})
	ctx := browser(t)
	dialogs := make(chan string, 4)
	go func() {
		for ev, err := range chromedp.Events(ctx, page.JavascriptDialogOpening) {
			if err != nil {
				return
			}
			dialogs <- ev.Message
			_, _ = chromedp.Call(ctx, page.HandleJavaScriptDialog, page.HandleJavaScriptDialogParams{Accept: true})
		}
	}()
	if err := chromedp.Do(ctx, chromedp.Navigate(e.http.URL+"/sites/"+e.site.GetId())); err != nil {
		t.Fatal(err)
	}
	signInBrowser(t, ctx, e.viewer)
	names := must(chromedp.Run(ctx, chromedp.Evaluate[[]string](
		`Array.from(document.querySelectorAll('#plan tbody a')).map(a => a.textContent)`)))
	var shown bool
	for _, n := range names {
		shown = shown || n == evil
	}
	if !shown {
		t.Fatalf("the name does not show as text: %q", names)
	}
	if n := must(chromedp.Run(ctx, chromedp.Evaluate[int](`document.scripts.length + document.images.length`))); n != 1 {
		t.Errorf("%d script and image elements on the page, want only the layout's script", n)
	}
	time.Sleep(200 * time.Millisecond)
	select {
	case m := <-dialogs:
		t.Fatalf("a dialog opened: %q", m)
	default:
	}
}

// fmtCountdown is live.js's countdown text of a duration.
func fmtCountdown(d time.Duration) string {
	s := int(d.Round(time.Second).Seconds())
	if h := s / 3600; h > 0 {
		return fmt.Sprintf("%dh%02dm", h, (s%3600)/60)
	}
	return fmt.Sprintf("%dm%02ds", s/60, s%60)
}
