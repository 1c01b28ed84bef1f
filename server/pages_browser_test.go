package server

import (
	"context"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	cdpbrowser "github.com/chromedp/cdproto/browser"
	"github.com/chromedp/chromedp"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// browserBudget bounds one browser session of a test: every step of it
// runs under this deadline.
const browserBudget = 90 * time.Second

// headless starts Debian's chromium headless with a fresh user-data
// directory and returns a tab's context.
func headless(t *testing.T, bin string) context.Context {
	t.Helper()
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(bin), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU, chromedp.NoFirstRun,
		chromedp.Flag("disable-quic", true), chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true), chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1200, 900),
	}
	ctx, cancel := context.WithTimeout(context.Background(), browserBudget)
	actx, cancelA := chromedp.NewExecAllocator(ctx, opts...)
	tctx, cancelT := chromedp.NewContext(actx)
	t.Cleanup(func() { cancelT(); cancelA(); cancel() })
	return tctx
}

// artifacts is where the browser tests keep their screenshots:
// $FLOWCAT_ARTIFACTS when set, else the test's temporary folder.
func artifacts(t *testing.T) string {
	if d := os.Getenv("FLOWCAT_ARTIFACTS"); d != "" {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		return d
	}
	return t.TempDir()
}

func run(t *testing.T, ctx context.Context, what string, steps ...chromedp.Action[chromedp.Void]) {
	t.Helper()
	if err := chromedp.Do(ctx, steps...); err != nil {
		t.Fatalf("browser, %s: %v", what, err)
	}
}

func eval[T any](t *testing.T, ctx context.Context, js string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](js))
	if err != nil {
		t.Fatalf("browser, evaluating %.60q: %v", js, err)
	}
	return v
}

func screenshot(t *testing.T, ctx context.Context, dir, name string) {
	t.Helper()
	b, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		t.Fatalf("screenshot %s: %v", name, err)
	}
	if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// signInBrowser pastes token into the sign-in form.
func signInBrowser(t *testing.T, ctx context.Context, base, token string) {
	run(t, ctx, "sign in",
		chromedp.Navigate(base+"/"),
		chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SetValue(chromedp.ID("token"), token),
		chromedp.Click(chromedp.CSS("#signin-form button[type=submit]")),
		chromedp.WaitVisible(chromedp.ID("signed-in")),
	)
}

// a11yJS lists what lacks a text alternative or a label: every svg must be
// role=img named by a non-empty element (its <title>), every img have
// alt, every visible form field a label (or aria-label), every button a
// name.
const a11yJS = `(() => {
  const bad = [];
  for (const s of document.querySelectorAll('svg')) {
    const ids = (s.getAttribute('aria-labelledby') || '').split(' ').filter(Boolean);
    const name = ids.map(i => (document.getElementById(i) || {}).textContent || '').join(' ').trim();
    if (s.getAttribute('role') !== 'img' || !name) bad.push('svg#' + s.id + ' has no text alternative');
    if (!s.querySelector('desc') || !s.querySelector('desc').textContent.trim()) bad.push('svg#' + s.id + ' has no description');
  }
  for (const i of document.querySelectorAll('img')) if (!i.hasAttribute('alt')) bad.push('img ' + i.src + ' has no alt');
  for (const f of document.querySelectorAll('input, select, textarea')) {
    if (f.type === 'hidden') continue;
    if (!(f.labels && f.labels.length) && !f.getAttribute('aria-label')) bad.push((f.id || f.name) + ' has no label');
  }
  for (const b of document.querySelectorAll('button')) if (!b.textContent.trim()) bad.push('a button has no name');
  if (!document.documentElement.lang) bad.push('the page names no language');
  return bad;
})()`

func a11y(t *testing.T, ctx context.Context, page string) {
	t.Helper()
	if bad := eval[[]string](t, ctx, a11yJS); len(bad) > 0 {
		t.Errorf("accessibility, %s: %s", page, strings.Join(bad, "; "))
	}
}

// floats reads a data-* attribute of every element a CSS selector finds.
func floats(t *testing.T, ctx context.Context, sel, attr string) []float64 {
	t.Helper()
	raw := eval[[]string](t, ctx, fmt.Sprintf(`Array.from(document.querySelectorAll(%q)).map(e => e.getAttribute(%q))`, sel, "data-"+attr))
	out := make([]float64, len(raw))
	for i, s := range raw {
		f, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatalf("%s data-%s %q: %v", sel, attr, s, err)
		}
		out[i] = f
	}
	return out
}

func sameFloats(t *testing.T, what string, got, want []float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Errorf("%s: %d values on the page, %d in the API", what, len(got), len(want))
		return
	}
	for i := range got {
		if got[i] != want[i] {
			t.Errorf("%s[%d]: page %v, API %v", what, i, got[i], want[i])
			return
		}
	}
}

// TestPagesInBrowser walks the pages in a real browser as a member: sign
// in, find the dataset, open a version, read every chart back against the
// API, download the bundle and check its sums; then publishes a draft as a
// curator and shows that a member cannot. Screenshots go to artifacts.
func TestPagesInBrowser(t *testing.T) {
	if raceEnabled {
		// The race detector slows the server several times over; the
		// plain go test run drives the browser, this one the handlers.
		t.Skip("skipped under the race detector: the plain go test run drives the browser")
	}
	bin := chromium(t)
	e := newPagesEnv(t)
	dir := artifacts(t)
	base := e.srv.URL
	dsAPI := "/api/v1/projects/ward/datasets/events"
	alerts := alertDataset(t, e.testEnv)
	ctx := headless(t, bin)

	// Keyboard: the first Tab reaches the skip link, a few more the token
	// field; the form is sent from the keyboard.
	run(t, ctx, "keyboard", chromedp.Navigate(base+"/"), chromedp.WaitVisible(chromedp.ID("token")), chromedp.KeyEvent("\t"))
	if got := eval[string](t, ctx, `document.activeElement.className + ' ' + document.activeElement.getAttribute('href')`); got != "skip #main" {
		t.Errorf("first Tab focuses %q, want the skip link", got)
	}
	tabs := 1
	for ; tabs < 6 && eval[string](t, ctx, `document.activeElement.id`) != "token"; tabs++ {
		run(t, ctx, "keyboard", chromedp.KeyEvent("\t"))
	}
	if tabs > 4 { // the skip link, the name, "Sign in", the field
		t.Fatalf("the token field is not reached by Tab (%d presses)", tabs)
	}
	a11y(t, ctx, "sign-in")
	screenshot(t, ctx, dir, "signin.png")
	run(t, ctx, "sign in from the keyboard",
		chromedp.SetValue(chromedp.ID("token"), e.member),
		chromedp.KeyEvent("\t"), chromedp.KeyEvent("\r"),
		chromedp.WaitVisible(chromedp.ID("signed-in")),
	)
	a11y(t, ctx, "catalog")
	screenshot(t, ctx, dir, "catalog.png")
	if got := eval[bool](t, ctx, `document.cookie.includes('flowcat_session')`); got {
		t.Error("a script can read the session cookie")
	}
	// Find the dataset by name.
	run(t, ctx, "filter",
		chromedp.WaitReady("body"), chromedp.WaitVisible(chromedp.ID("f-q")),
		chromedp.SetValue(chromedp.ID("f-q"), "nightly"),
	)
	// The form's answer is a new page: wait for it, or the dataset's link
	// is found on the page before, which the answer then replaces.
	if _, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.CSS("#filters button"))); err != nil {
		t.Fatalf("browser, filter: %v", err)
	}
	run(t, ctx, "open the dataset",
		chromedp.WaitVisible(chromedp.CSS(`li.dataset[data-dataset="ward/events"]`)),
		chromedp.Click(chromedp.CSS(`li.dataset a[href="/view/ward/events"]`)),
		chromedp.WaitVisible(chromedp.ID("versions")),
	)
	if loc, _ := chromedp.Run(ctx, chromedp.Location()); strings.Contains(loc, "token") || strings.Contains(loc, e.member) {
		t.Errorf("the address holds the token: %s", loc)
	}
	a11y(t, ctx, "dataset")
	screenshot(t, ctx, dir, "dataset.png")
	// The trend: one marker per upload the member sees, at its score.
	var tr api.Trend
	e.decode(e.get(dsAPI+"/quality/trend?site=*", e.member), &tr)
	var seqs, scores []float64
	for _, p := range tr.Points {
		if p.Score != nil {
			seqs, scores = append(seqs, float64(p.Seq)), append(scores, *p.Score)
		}
	}
	sameFloats(t, "trend upload numbers", floats(t, ctx, "#trend-all .mark", "seq"), seqs)
	sameFloats(t, "trend scores", floats(t, ctx, "#trend-all .mark", "score"), scores)
	if n := eval[int](t, ctx, `document.querySelectorAll('#trend-all .mark.alert').length`); n != len(alertedUploads(tr, "*")) {
		t.Errorf("trend marks %d alerts, the API %d", n, len(alertedUploads(tr, "*")))
	}

	// Alerts are marked where the API raised them.
	run(t, ctx, "alerted dataset", chromedp.Navigate(base+"/view/ward/nightly"), chromedp.WaitVisible(chromedp.ID("trend-all")))
	var ntr api.Trend
	e.decode(e.get("/api/v1/projects/ward/datasets/nightly/quality/trend", e.member), &ntr)
	for _, site := range []string{"*", "ward-3"} {
		id := map[string]string{"*": "#trend-all", "ward-3": "#trend-ward-3"}[site]
		var want []float64
		for _, a := range alertedUploads(ntr, site) {
			want = append(want, float64(a.Seq))
		}
		sameFloats(t, "alerted uploads at "+site, floats(t, ctx, id+" .mark.alert", "seq"), want)
	}
	if len(alerts) == 0 || len(alertedUploads(ntr, "*")) == 0 {
		t.Error("the alerted dataset shows no alert in the trend")
	}
	screenshot(t, ctx, dir, "dataset-alerts.png")
	run(t, ctx, "back to events", chromedp.Navigate(base+"/view/ward/events"), chromedp.WaitVisible(chromedp.ID("versions")))

	// Open version 1 and read its charts back.
	run(t, ctx, "open a version",
		chromedp.Click(chromedp.CSS(`#versions a[href="/view/ward/events/1"]`)),
		chromedp.WaitVisible(chromedp.ID("arrivals-how")),
	)
	a11y(t, ctx, "version")
	screenshot(t, ctx, dir, "version.png")
	var sum summary.Summary
	e.decode(e.get(dsAPI+"/versions/1/summary", e.member), &sum)
	var means, lows, highs []float64
	for _, r := range sum.Arrivals.HourOfWeek {
		means, lows, highs = append(means, r.Mean), append(lows, r.Lower), append(highs, r.Upper)
	}
	sameFloats(t, "arrivals per hour of week", floats(t, ctx, "#arrivals-how rect.bar", "value"), means)
	sameFloats(t, "arrival intervals, lower", floats(t, ctx, "#arrivals-how line.ci", "lower"), lows)
	sameFloats(t, "arrival intervals, upper", floats(t, ctx, "#arrivals-how line.ci", "upper"), highs)
	var los []float64
	for _, c := range sum.LengthOfStay.Histogram.Counts {
		los = append(los, float64(c))
	}
	sameFloats(t, "length-of-stay bins", floats(t, ctx, "#los-hist rect.bar", "value"), los)
	sameFloats(t, "Little's law sides", floats(t, ctx, "#occupancy line.ref", "value"), []float64{sum.Occupancy.Little.L, sum.Occupancy.Little.LambdaW})
	occ := eval[string](t, ctx, `document.querySelector('#occupancy polyline').getAttribute('data-values')`)
	if n := len(strings.Fields(occ)); n != len(sum.Occupancy.HourOfWeek) {
		t.Errorf("occupancy line has %d values, the API %d", n, len(sum.Occupancy.HourOfWeek))
	}
	charts := 3
	for _, a := range sum.Activities {
		if a.Lognormal == nil || !(a.Lognormal.SDLog > 0) {
			continue
		}
		charts++
		id := "#service-" + a.Name
		sameFloats(t, "lognormal of "+a.Name, floats(t, ctx, id+" polyline", "meanlog"), []float64{a.Lognormal.MeanLog})
		var qs []float64
		for _, q := range []float64{a.Service.P50, a.Service.P90, a.Service.P95, a.Service.P99} {
			if q > 0 {
				qs = append(qs, q)
			}
		}
		sameFloats(t, "service quantiles of "+a.Name, floats(t, ctx, id+" line.ref", "value"), qs)
	}
	var waits, waitBins []float64
	for _, q := range sum.Queues {
		if q.Patience != nil && len(q.Patience.Steps) > 0 {
			charts++
		}
		if h := q.Wait.Histogram; h != nil && len(h.Counts) > 0 {
			charts++
			for _, c := range h.Counts {
				waitBins = append(waitBins, float64(c))
			}
		}
		if q.Wait.N > 0 {
			waits = append(waits, q.Wait.P50, q.Wait.P90, q.Wait.P95, q.Wait.P99)
		}
	}
	if len(waits) > 0 {
		charts++
		sameFloats(t, "wait quantiles", floats(t, ctx, "#waits rect.bar", "value"), waits)
	}
	if len(waitBins) > 0 {
		sameFloats(t, "wait bins", floats(t, ctx, `svg[id^="wait-hist-"] rect.bar`, "value"), waitBins)
	}
	if sum.Process != nil && len(sum.Process.Variants) > 0 {
		charts++
		var shares []float64
		for i, v := range sum.Process.Variants {
			if i < 10 {
				shares = append(shares, v.Share)
			}
		}
		sameFloats(t, "path shares", floats(t, ctx, "#variants rect.bar", "value"), shares)
	}
	if n := eval[int](t, ctx, `document.querySelectorAll('main svg').length`); n != charts {
		t.Errorf("the version page draws %d charts, want %d", n, charts)
	}
	// On a phone-sized screen nothing but the wide tables (which scroll
	// in their own box) runs off the page.
	run(t, ctx, "phone size", chromedp.EmulateViewport(390, 844))
	if w := eval[int](t, ctx, `document.documentElement.scrollWidth`); w > 392 {
		wide := eval[[]string](t, ctx, `Array.from(document.querySelectorAll('main *')).filter(e => e.getBoundingClientRect().right > 392).slice(0, 8).map(e => e.tagName + '#' + e.id + '.' + e.className + ' ' + Math.round(e.getBoundingClientRect().right))`)
		t.Errorf("on a 390 px screen the page is %d px wide: %v", w, wide)
	}
	screenshot(t, ctx, dir, "version-phone.png")
	run(t, ctx, "desktop size", chromedp.EmulateViewport(1200, 900))

	// Download the bundle through the page's link; check its sums.
	downloads := t.TempDir()
	progress := chromedp.Events(ctx, cdpbrowser.DownloadProgress)
	run(t, ctx, "download the bundle",
		chromedp.Func(func(ctx context.Context, _ *chromedp.Target) error {
			_, err := chromedp.Call(ctx, cdpbrowser.SetDownloadBehavior, cdpbrowser.SetDownloadBehaviorParams{
				Behavior: cdpbrowser.SetDownloadBehaviorBehaviorAllowAndName, DownloadPath: downloads, EventsEnabled: ptrTo(true),
			})
			return err
		}),
		chromedp.Click(chromedp.ID("bundle-zip")),
	)
	var file string
	for ev, err := range progress {
		if err != nil {
			t.Fatalf("download: %v", err)
		}
		if ev.State == cdpbrowser.DownloadProgressStateCanceled {
			t.Fatal("download cancelled")
		}
		if ev.State == cdpbrowser.DownloadProgressStateCompleted {
			file = filepath.Join(downloads, ev.GUID)
			break
		}
	}
	zb, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	checkBundleSums(t, zb)

	// A member has no publish button, and a forged form is refused.
	run(t, ctx, "member on a published version", chromedp.Navigate(base+"/view/ward/events/1"), chromedp.WaitVisible(chromedp.ID("state")))
	if n := eval[int](t, ctx, `document.querySelectorAll('#publish, #withdraw').length`); n != 0 {
		t.Error("a member is shown curation buttons")
	}
	eval[bool](t, ctx, `(() => {
  const f = document.createElement('form'); f.method = 'post'; f.action = '/view/ward/events/3/publish';
  const i = document.createElement('input'); i.type = 'hidden'; i.name = 'csrf';
  i.value = document.querySelector('input[name=csrf]').value; f.appendChild(i);
  document.body.appendChild(f); f.submit(); return true; })()`)
	run(t, ctx, "member forges a publish form", chromedp.WaitVisible(chromedp.ID("problem")))
	if msg := eval[string](t, ctx, `document.getElementById('problem').textContent`); !strings.Contains(msg, "403") {
		t.Errorf("member's publish: %q, want a 403", msg)
	}
	screenshot(t, ctx, dir, "member-refused.png")

	// A curator, in a browser of their own, publishes draft 3.
	cctx := headless(t, bin)
	signInBrowser(t, cctx, base, e.curator)
	run(t, cctx, "curator opens the draft", chromedp.Navigate(base+"/view/ward/events/3"), chromedp.WaitVisible(chromedp.ID("publish")))
	a11y(t, cctx, "draft version (curator)")
	screenshot(t, cctx, dir, "draft-curator.png")
	run(t, cctx, "publish", chromedp.Click(chromedp.ID("publish")), chromedp.WaitVisible(chromedp.CSS("#state.published")))
	var v catalog.Version
	e.decode(e.get(dsAPI+"/versions/3", e.member), &v)
	if v.State != catalog.StatePublished || v.PublishedBy != "curator-ward" {
		t.Fatalf("after publishing in the browser, the API says %+v", v.State)
	}
	e.mustStatus(e.get(dsAPI+"/versions/3", e.member), http.StatusOK, "member reads the published version")
	t.Logf("screenshots in %s", dir)
}

func alertedUploads(tr api.Trend, site string) []catalog.UploadAlert {
	seen := map[int]bool{}
	var out []catalog.UploadAlert
	for _, a := range tr.Alerts {
		if a.Site == site && !seen[a.Seq] {
			seen[a.Seq] = true
			out = append(out, a)
		}
	}
	return out
}

func ptrTo[T any](v T) *T { return &v }
