package cli_test

import (
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// A dataset's window may be given as dates: the start of each day in the
// dataset's zone (its --timezone, else its profile's), said on stderr.
// Offsets per the IANA tz database (America/Halifax: -04:00 until the
// second Sunday of March, then -03:00; Europe/Amsterdam: +01:00 in
// winter), recalled from memory and checked by time.LoadLocation.
func TestWindowDates(t *testing.T) {
	url, issue := served(t)
	admin := map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": issue("--role", "admin", "--subject", "ops")}
	if code, _, errs := run(t, admin, "project", "create", "flow"); code != 0 {
		t.Fatalf("project create: %d %s", code, errs)
	}
	window := func(out string) (from, to time.Time) {
		t.Helper()
		var d catalog.Dataset
		if err := json.Unmarshal([]byte(out), &d); err != nil {
			t.Fatalf("%v: %s", err, out)
		}
		if d.WindowFrom != nil {
			from = *d.WindowFrom
		}
		if d.WindowTo != nil {
			to = *d.WindowTo
		}
		return from, to
	}
	hfx, err := time.LoadLocation("America/Halifax")
	if err != nil {
		t.Fatal(err)
	}
	code, out, errs := run(t, admin, "--json", "dataset", "create", "flow/halifax", "--timezone", "America/Halifax", "--window-from", "2026-03-01", "--window-to", "2026-04-01")
	if code != 0 {
		t.Fatalf("dataset create: %d %s", code, errs)
	}
	from, to := window(out)
	if !from.Equal(time.Date(2026, 3, 1, 0, 0, 0, 0, hfx)) || !to.Equal(time.Date(2026, 4, 1, 0, 0, 0, 0, hfx)) ||
		!strings.Contains(errs, "--window-from 2026-03-01: taken as the start of that day in the dataset's zone, America/Halifax: 2026-03-01T00:00:00-04:00") ||
		!strings.Contains(errs, "2026-04-01T00:00:00-03:00") {
		t.Errorf("window %v .. %v; stderr %q", from, to, errs)
	}
	// The profile's zone where no --timezone is given.
	prof := writeFile(t, t.TempDir(), "p.yaml", "timezone: Europe/Amsterdam\nfields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: t\n")
	code, out, errs = run(t, admin, "--json", "dataset", "create", "flow/ams", "--profile", prof, "--window-from", "2026-01-10")
	if from, _ := window(out); code != 0 || !from.Equal(time.Date(2026, 1, 9, 23, 0, 0, 0, time.UTC)) || !strings.Contains(errs, "Europe/Amsterdam: 2026-01-10T00:00:00+01:00") {
		t.Errorf("profile zone: exit %d, from %v, %s", code, from, errs)
	}
	// An edit takes the dataset's zone.
	code, _, errs = run(t, admin, "dataset", "edit", "flow/halifax", "--window-from", "2026-03-15", "--window-to", "2026-04-01")
	if code != 0 || !strings.Contains(errs, "America/Halifax: 2026-03-15T00:00:00-03:00") {
		t.Errorf("edit: exit %d, %q", code, errs)
	}
	// Anything else is refused by name.
	if code, _, errs := run(t, admin, "dataset", "create", "flow/bad", "--window-from", "01/03/2026"); code != 2 || !strings.Contains(errs, `--window-from "01/03/2026"`) {
		t.Errorf("bad date: exit %d, %q", code, errs)
	}
}
