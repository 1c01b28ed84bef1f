package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"net"
	"net/url"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema/synth"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// The demo's invented scenario: a project of the invented Quillon Bay
// Health network with one dataset per partner site.
const demoProject = "quillon-flow"

var demoDatasets = []struct{ site, dataset, title, ext string }{
	{"qb-walkin", "walkin-visits", "Quillon Bay walk-in clinic: visits", "csv"},
	{"qb-nurseline", "nurseline-calls", "Quillon Bay nurse advice line: calls", "jsonl"},
}

// demoFiles is the folder of the data directory where the demo leaves
// what its printed commands use: a token per role, the partners' mapping
// profiles and the walk-in clinic's last export, held back for the
// partner to send. The server never reads it.
const demoFiles = "demo"

// DefaultDemoNights is the demo's default run of nights: four weeks, so
// that currentness has the three weeks of history it judges gaps against
// (quality/SCORING.md, GapMinWeeks).
const DefaultDemoNights = 28

func newDemoCmd(e *env) *cobra.Command {
	var dir, addr string
	var days int
	var seed uint64
	c := &cobra.Command{
		Use:   "demo [--data DIR] [--addr HOST:PORT]",
		Short: "Serve four invented weeks of clinic data, with a guided tour",
		Long: `Demo starts a server on a new data directory, creates the invented Quillon Bay Health
scenario (a walk-in clinic and a nurse advice line; every name and event is made up), and sends
one export per site and simulated night through the HTTP API, each received the night after its
day, so that trends, currentness and drift alerts have a history. Two defects are planted on top
of the scattered bad rows every night has: the phone line's export loses its nurse column one
night (a drift alert), and the line is down for a morning earlier on (a gap in currentness).
The walk-in clinic's last night is held back for you to send as the partner.

It prints the URL and, for each role (partner, curator, student), commands that run as printed in
another shell, then serves until interrupted. The data directory stays; demo says how to serve it
again. A busy --addr is refused before anything is created.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if days < 2 || days > 366 {
				return usageErr("demo: --days must be 2 to 366")
			}
			// The port first: a busy one is refused before anything exists.
			ln, err := net.Listen("tcp", addr)
			if err != nil {
				return fmt.Errorf("demo: cannot listen on %s (%v): another demo or server may run there; stop it, or give another --addr (127.0.0.1:0 takes a free port); nothing was created", addr, errors.Unwrap(err))
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), syscall.SIGINT, syscall.SIGTERM)
			defer stop()
			if dir == "" {
				tmp, err := os.MkdirTemp("", "flowcat-demo-*")
				if err != nil {
					ln.Close()
					return err
				}
				dir = tmp
			} else if ents, err := os.ReadDir(dir); err == nil && len(ents) > 0 {
				ln.Close()
				return usageErr("demo: %s is not empty; give a new or empty directory", dir)
			} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
				ln.Close()
				return err
			}
			if abs, err := filepath.Abs(dir); err == nil {
				dir = abs
			}
			d := dataDir(dir)
			if _, err := initDataDir(d, "", ""); err != nil {
				ln.Close()
				return err
			}
			prog := programName()
			out := e.stdout
			fmt.Fprintf(out, "flowcat demo: every site, name and event below is invented.\n")
			fmt.Fprintf(out, "data directory %s (it stays when the demo stops)\n", dir)
			fmt.Fprintf(out, "the demo made its own master key there, %s (fine for a demo; keep real keys apart from the data)\n\n", filepath.Base(d.masterKey()))

			logw := io.Discard
			if !e.quiet {
				logw = e.stderr
			}
			log := slog.New(slog.NewTextHandler(logw, &slog.HandlerOptions{Level: slog.LevelWarn}))
			clock := &demoClock{}
			run, err := startServerOn(ctx, d, ln, "", serverOptions{citationAuthor: "Quillon Bay Health operations study (invented)", now: clock.Now}, log)
			if err != nil {
				return err
			}
			tokens, err := demoTokens(run)
			if err != nil {
				run.close()
				return err
			}
			g := &demoGuide{prog: prog, dir: dir, url: run.url, addr: ln.Addr().String(), tokens: tokens}
			if err := g.writeTokens(); err != nil {
				run.close()
				return err
			}
			// The run of nights ends yesterday, so no event lies after its upload.
			first := time.Now().UTC().Truncate(24*time.Hour).AddDate(0, 0, -days)
			if err := e.seedDemo(cmd, g, clock, first, days, seed); err != nil {
				stop()
				run.wait(ctx)
				return err
			}
			clock.release()
			g.print(out)
			err = run.wait(ctx)
			g.farewell(out)
			return err
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory to create (default: a new temporary directory)")
	c.Flags().StringVar(&addr, "addr", "127.0.0.1:8470", "listen address HOST:PORT")
	c.Flags().IntVar(&days, "days", DefaultDemoNights, "nights of uploads to simulate (2 to 366)")
	c.Flags().Uint64Var(&seed, "seed", 20261202, "random seed of the generated scenario")
	return c
}

// demoClock is the catalog's clock during the demo: the simulated night
// of each upload while seeding (never after the real time), then the real
// time.
type demoClock struct {
	mu sync.Mutex
	at time.Time
}

func (c *demoClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.at.IsZero() {
		return time.Now()
	}
	return c.at
}

func (c *demoClock) set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if now := time.Now(); t.After(now) {
		t = now
	}
	c.at = t
}

// release hands the clock back to the real time.
func (c *demoClock) release() {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.at = time.Time{}
}

type demoTokenSet struct{ admin, curator, member, partner string }

func demoTokens(run *running) (demoTokenSet, error) {
	var t demoTokenSet
	var parts []string
	for _, d := range demoDatasets {
		parts = append(parts, demoProject+"/"+d.dataset)
	}
	for _, g := range []struct {
		dst  *string
		role string
		sub  string
	}{
		{&t.admin, "admin", "demo-admin"},
		{&t.curator, "curator", "demo-curator"},
		{&t.member, "member", "demo-student"},
		{&t.partner, "partner", "demo-partner-uploader"},
	} {
		tok, err := run.auth.IssueRecorded(context.Background(), run.store, operator, grantFor(g.role, g.sub, demoProject, parts, 24*time.Hour))
		if err != nil {
			return t, err
		}
		*g.dst = tok
	}
	return t, nil
}

// demoGuide is what the demo tells its user: where things are and the
// commands of each role.
type demoGuide struct {
	prog, dir, url, addr string
	tokens               demoTokenSet
	expires              time.Time

	heldBack string // the walk-in export left for the partner
	profile  string // its mapping profile
	from     string // a date for summary --from
	// The nurse line's version before the night that lost a column, and
	// that night's version: what the curator compares.
	dropBefore, dropAt int
	alerts             []string // drift alerts raised while seeding
}

func (g *demoGuide) files(name string) string { return filepath.Join(g.dir, demoFiles, name) }

func (g *demoGuide) writeTokens() error {
	if err := os.MkdirAll(filepath.Join(g.dir, demoFiles), 0o700); err != nil {
		return err
	}
	g.expires = time.Now().Add(24 * time.Hour)
	for role, tok := range map[string]string{"admin": g.tokens.admin, "curator": g.tokens.curator, "member": g.tokens.member, "partner": g.tokens.partner} {
		if err := os.WriteFile(g.files(role+".token"), []byte(tok+"\n"), 0o600); err != nil {
			return err
		}
	}
	return nil
}

// seedDemo creates the project and datasets as the curator would and sends
// the export of every night from first on as the partner would, through
// the HTTP API, each at its simulated night.
func (e *env) seedDemo(cmd *cobra.Command, g *demoGuide, clock *demoClock, first time.Time, days int, seed uint64) error {
	ctx := cmd.Context()
	t := g.tokens
	sc := synth.QuillonBay(seed, first, days)
	clock.set(first.Add(-6 * time.Hour)) // the study was set up the evening before
	admin := &env{stdout: io.Discard, stderr: e.stderr, server: g.url, token: t.admin, quiet: true}
	cl, err := admin.client()
	if err != nil {
		return err
	}
	if err := cl.postJSON(ctx, "/projects", api.CreateProject{Name: demoProject, Title: "Quillon Bay Health patient-flow study (invented)"}, nil); err != nil {
		return err
	}
	cur := &env{stdout: io.Discard, stderr: e.stderr, server: g.url, token: t.curator, quiet: true}
	ccl, _ := cur.client()
	for _, d := range demoDatasets {
		prof := sc.Profile(d.site)
		req := api.CreateDataset{Name: d.dataset, Title: d.title, Profile: string(prof)}
		if err := ccl.postJSON(ctx, "/projects/"+demoProject+"/datasets", req, nil); err != nil {
			return fmt.Errorf("demo: creating %s: %w", d.dataset, err)
		}
		if err := os.WriteFile(g.files(d.site+".profile.yaml"), prof, 0o644); err != nil {
			return err
		}
	}
	g.profile = g.files(demoDatasets[0].site + ".profile.yaml")
	g.from = first.AddDate(0, 0, days-8).Format("2006-01-02")
	part := &env{stdout: io.Discard, stderr: io.Discard, server: g.url, token: t.partner, quiet: true}
	pcl, _ := part.client()
	plan := demoPlan(days)
	fmt.Fprintf(e.stdout, "%d simulated nights of uploads through %s/api/v1,\neach received at about 2 am after its day:\n", days, g.url)
	fmt.Fprintf(e.stdout, "  %-10s  %-29s  %s\n", "day", demoDatasets[0].dataset, demoDatasets[1].dataset)
	for day := 0; day < days; day++ {
		cells := make([]string, len(demoDatasets))
		for i, d := range demoDatasets {
			si, _, err := sc.Site(d.site)
			if err != nil {
				return err
			}
			var buf bytes.Buffer
			if _, err := sc.Night(d.site, day, &buf); err != nil {
				return fmt.Errorf("demo: generating %s day %d: %w", d.site, day, err)
			}
			name := fmt.Sprintf("%s-%s.%s", d.site, first.AddDate(0, 0, day).Format("2006-01-02"), d.ext)
			if i == 0 && day == days-1 {
				// Held back: the partner sends it by hand.
				g.heldBack = g.files(name)
				if err := os.WriteFile(g.heldBack, buf.Bytes(), 0o644); err != nil {
					return err
				}
				cells[i] = "held back for you"
				continue
			}
			body := buf.Bytes()
			switch {
			case i == 1 && day == plan.dropColumn:
				body = jsonlWithout(body, "nurse")
			case i == 1 && day == plan.outage:
				body = jsonlOutage(body, "ts", "call", 10*time.Hour, 12*time.Hour+30*time.Minute)
			}
			// Received at 02:10 (clinic) and 02:40 (line) after the day, local time.
			next, err := sc.DayStart(si, day+1)
			if err != nil {
				return err
			}
			clock.set(next.Add(2*time.Hour + time.Duration(10+30*i)*time.Minute))
			r := ref{Project: demoProject, Dataset: d.dataset}
			ans, err := part.uploadFile(cmd, pcl, r, bytes.NewReader(body), url.Values{"filename": {name}}, int64(len(body)))
			if err != nil {
				if errors.Is(err, errSilent) {
					cells[i] = "rejected"
					continue
				}
				return fmt.Errorf("demo: uploading %s: %w", name, err)
			}
			rep := ans.Upload.Report
			if ans.Version == nil {
				cells[i] = string(ans.Upload.Status)
				continue
			}
			cells[i] = fmt.Sprintf("@%-3d %5d rows  score %s", ans.Version.Number, rep.Rows.Accepted, score(rep.Score))
			if i == 1 && day == plan.dropColumn {
				g.dropAt = ans.Version.Number
			}
			if i == 1 && day == plan.dropColumn-1 {
				g.dropBefore = ans.Version.Number
			}
			for _, a := range ans.Upload.Alerts {
				g.alerts = append(g.alerts, fmt.Sprintf("%s@%d, %s: %s", d.dataset, ans.Version.Number, a.Code, a.Sentence))
			}
			if len(ans.Upload.Alerts) > 0 {
				cells[i] += " *"
			}
		}
		fmt.Fprintf(e.stdout, "  %-10s  %-29s  %s\n", first.AddDate(0, 0, day).Format("2006-01-02"), cells[0], cells[1])
	}
	if len(g.alerts) > 0 {
		fmt.Fprintln(e.stdout, "  * the upload raised drift alerts (below)")
	}
	return nil
}

// demoPlan says on which nights the planted defects fall: the lost column
// two nights before the end, once five nights of history exist (drift
// needs them: quality.DriftOptions.MinHistory), and the outage six nights
// before the end, once three weeks exist (currentness judges hours
// against them). -1: not planted.
type demoNights struct{ dropColumn, outage int }

func demoPlan(days int) demoNights {
	p := demoNights{dropColumn: -1, outage: -1}
	if days-2 >= 6 {
		p.dropColumn = days - 2
	}
	if days-6 >= 21 {
		p.outage = days - 6
	}
	return p
}

// jsonlLine is one line of a JSON Lines export: an object, or (raw) a
// line that is not one, kept as it is.
type jsonlLine struct {
	obj map[string]any
	raw []byte
}

// jsonlWithout removes key from every JSON Lines object: an export that
// lost a column.
func jsonlWithout(b []byte, key string) []byte {
	return jsonlEdit(b, func(ls []jsonlLine) []jsonlLine {
		for _, l := range ls {
			delete(l.obj, key)
		}
		return ls
	})
}

// jsonlOutage drops every case (by caseKey) whose first event (timeKey,
// RFC 3339) falls in [from, to) after its local midnight: a line that was
// down for a morning.
func jsonlOutage(b []byte, timeKey, caseKey string, from, to time.Duration) []byte {
	return jsonlEdit(b, func(ls []jsonlLine) []jsonlLine {
		first := map[any]time.Time{}
		for _, l := range ls {
			s, _ := l.obj[timeKey].(string)
			t, err := time.Parse(time.RFC3339, s)
			if err != nil {
				continue
			}
			if f, ok := first[l.obj[caseKey]]; !ok || t.Before(f) {
				first[l.obj[caseKey]] = t
			}
		}
		return slices.DeleteFunc(ls, func(l jsonlLine) bool {
			t, ok := first[l.obj[caseKey]]
			if l.obj == nil || !ok {
				return false
			}
			since := t.Sub(time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, t.Location()))
			return since >= from && since < to
		})
	})
}

// jsonlEdit decodes each line, lets edit change the list, and encodes it
// again; numbers keep their digits, lines that are not objects their bytes.
func jsonlEdit(b []byte, edit func([]jsonlLine) []jsonlLine) []byte {
	var ls []jsonlLine
	for _, l := range bytes.Split(bytes.TrimRight(b, "\n"), []byte("\n")) {
		dec := json.NewDecoder(bytes.NewReader(l))
		dec.UseNumber()
		var o map[string]any
		if err := dec.Decode(&o); err != nil || o == nil {
			ls = append(ls, jsonlLine{raw: l})
			continue
		}
		ls = append(ls, jsonlLine{obj: o})
	}
	var out bytes.Buffer
	enc := json.NewEncoder(&out)
	enc.SetEscapeHTML(false)
	for _, l := range edit(ls) {
		if l.obj == nil {
			out.Write(l.raw)
			out.WriteByte('\n')
			continue
		}
		enc.Encode(l.obj) // a decoded object always encodes
	}
	return out.Bytes()
}

// programName is how the user ran this program, as a command they can type
// again: "go run ./cli/flowcat" under go run, the bare name when it is the
// one on PATH, else the executable's path.
func programName() string {
	exe, err := os.Executable()
	if err != nil {
		return "flowcat"
	}
	if resolved, err := filepath.EvalSymlinks(exe); err == nil {
		exe = resolved
	}
	if strings.Contains(exe, string(filepath.Separator)+"go-build") {
		return "go run ./cli/flowcat"
	}
	if onPath, err := exec.LookPath(filepath.Base(exe)); err == nil {
		a, errA := os.Stat(onPath)
		b, errB := os.Stat(exe)
		if errA == nil && errB == nil && os.SameFile(a, b) {
			return filepath.Base(exe)
		}
	}
	return shellQuote(exe)
}

func (g *demoGuide) print(w io.Writer) {
	q := shellQuote
	p := g.prog
	fmt.Fprintln(w)
	if len(g.alerts) > 0 {
		fmt.Fprintln(w, "drift alerts raised on the way (the curator looks at them below):")
		for _, a := range g.alerts {
			fmt.Fprintf(w, "  %s\n", quality.WrapText(a, 78, "    "))
		}
		fmt.Fprintln(w)
	}
	fmt.Fprintf(w, "serving at %s until you press Ctrl-C\n\n", g.url)
	if p == "go run ./cli/flowcat" {
		if wd, err := os.Getwd(); err == nil {
			fmt.Fprintf(w, "The commands use go run, so run them in %s (or go build -o flowcat ./cli/flowcat once).\n", wd)
		}
	}
	fmt.Fprintf(w, "In another shell, run these as printed. Tokens, profiles and one export are in\n%s; the tokens hold until %s.\n\n", filepath.Join(g.dir, demoFiles), g.expires.UTC().Format("2006-01-02 15:04 UTC"))
	fmt.Fprintf(w, "  export FLOWCAT_SERVER=%s\n\n", g.url)
	walk, line := demoProject+"/"+demoDatasets[0].dataset, demoProject+"/"+demoDatasets[1].dataset
	fmt.Fprintf(w, "1. The partner (the walk-in clinic's IT) checks last night's export and sends it:\n")
	fmt.Fprintf(w, "  export FLOWCAT_TOKEN=\"$(cat %s)\"\n", q(g.files("partner.token")))
	fmt.Fprintf(w, "  %s validate %s --profile %s\n", p, q(g.heldBack), q(g.profile))
	fmt.Fprintf(w, "  %s upload %s %s\n\n", p, walk, q(g.heldBack))
	fmt.Fprintf(w, "2. The curator (the lab manager) looks at what arrived and what drifted:\n")
	fmt.Fprintf(w, "  export FLOWCAT_TOKEN=\"$(cat %s)\"\n", q(g.files("curator.token")))
	fmt.Fprintf(w, "  %s uploads %s\n", p, walk)
	fmt.Fprintf(w, "  %s alerts %s\n", p, line)
	fmt.Fprintf(w, "  %s quality %s --trend --site qb-nurseline\n", p, line)
	if g.dropBefore > 0 && g.dropAt > 0 {
		fmt.Fprintf(w, "  %s diff %s@%d %s@%d\n", p, line, g.dropBefore, line, g.dropAt)
	}
	fmt.Fprintf(w, "  %s quality %s@latest\n\n", p, line)
	fmt.Fprintf(w, "3. The student pulls a snapshot, checks it and cites it:\n")
	fmt.Fprintf(w, "  export FLOWCAT_TOKEN=\"$(cat %s)\"\n", q(g.files("member.token")))
	fmt.Fprintf(w, "  %s versions %s\n", p, walk)
	fmt.Fprintf(w, "  %s summary %s --from %s\n", p, walk, g.from)
	fmt.Fprintf(w, "  %s pull %s@latest -o walkin-snapshot\n", p, walk)
	fmt.Fprintf(w, "  %s verify walkin-snapshot\n", p)
	fmt.Fprintf(w, "  %s cite %s@latest\n\n", p, walk)
	fmt.Fprintf(w, "Or in a browser: open %s/ and paste the student's token (%s) to sign in;\n  it is kept in a cookie for this server only, never in an address.\n\n", g.url, q(g.files("member.token")))
	fmt.Fprintf(w, "Press Ctrl-C to stop.\n")
}

// farewell says where the data stays and how to serve it again.
func (g *demoGuide) farewell(w io.Writer) {
	q := shellQuote
	fmt.Fprintf(w, "\ndemo stopped. Its data stays in %s\n", g.dir)
	fmt.Fprintf(w, "  serve it again:  %s serve --data %s --addr %s\n", g.prog, q(g.dir), g.addr)
	fmt.Fprintf(w, "  its tokens:      %s, valid until %s\n", q(filepath.Join(g.dir, demoFiles)), g.expires.UTC().Format("2006-01-02 15:04 UTC"))
	fmt.Fprintf(w, "  new tokens:      %s token issue --data %s --role member --project %s --subject student\n", g.prog, q(g.dir), demoProject)
	fmt.Fprintf(w, "  remove it:       rm -r %s\n", q(g.dir))
}
