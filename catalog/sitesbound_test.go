package catalog

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/quality"
)

// siteRows are n events, one arrival a minute from genBase, the i-th of
// site "s<i mod sites>": a free-text column mapped to site.
func siteRows(n, sites int) []row {
	rows := make([]row, 0, n)
	for i := range n {
		at := genBase.Add(time.Duration(i) * time.Minute).Format(time.RFC3339)
		rows = append(rows, row{fmt.Sprintf("s%05d", i%sites), fmt.Sprintf("c%d", i), "", "", "arrival", "", "", at, "", "", "", ""})
	}
	return rows
}

// TestUploadCountsSitesBound: an upload's per-site event counts tell
// apart the first quality.MaxSites sites met in time order and count the
// others under quality.OtherSite, as the quality report does, so the
// upload record does not grow with the number of sites; every event is
// counted once. Checked against a count by site kept here.
func TestUploadCountsSitesBound(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "many", nil)
	const sites = quality.MaxSites + 44
	rows := siteRows(2*sites+7, sites)
	want := map[string]int64{}
	firstSeen := map[string]int{}
	for i, r := range rows {
		if _, ok := firstSeen[r[0]]; !ok {
			firstSeen[r[0]] = i
		}
	}
	for _, r := range rows {
		name := r[0]
		if firstSeen[name] >= quality.MaxSites { // met after the first 256 sites
			name = quality.OtherSite
		}
		want[name]++
	}
	res := e.ingest(t, "lab", "many", csvBytes(header, rows), "sites.csv")
	got := res.Upload.Events.Sites
	if len(got) != quality.MaxSites+1 {
		t.Fatalf("%d sites counted, want %d and %q", len(got), quality.MaxSites, quality.OtherSite)
	}
	var read int64
	for _, s := range got {
		if s.Read != want[s.Site] || s.New != s.Read {
			t.Errorf("site %q: read %d new %d, want %d", s.Site, s.Read, s.New, want[s.Site])
		}
		read += s.Read
	}
	if read != int64(len(rows)) || res.Upload.Events.Read != read {
		t.Errorf("sites read %d, upload %d, want %d", read, res.Upload.Events.Read, len(rows))
	}
}

// TestReplaceWindowSitesBound: a replace-window upload replaces at most
// MaxReplacedSites sites; one whose events name more is refused, naming
// the first line of a site past the bound, and nothing is stored; listing
// more is refused before a byte is read.
func TestReplaceWindowSitesBound(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "wide", nil)
	ctx := context.Background()
	first := siteRows(10, 10)
	e.ingest(t, "lab", "wide", csvBytes(header, first), "first.csv")
	from, to := genBase, genBase.Add(100*24*time.Hour)

	rows := siteRows(MaxReplacedSites+3, MaxReplacedSites+1)
	blobs := len(e.blobIDs(t))
	res, err := e.ingestOpt(t, "lab", "wide", csvBytes(header, rows), IngestOptions{Mode: ModeReplaceWindow, From: from, To: to})
	if !errors.Is(err, ErrRejected) || res == nil || res.Upload.Error == nil {
		t.Fatalf("err %v, result %+v; want a rejection", err, res)
	}
	ue := res.Upload.Error
	// Line 1 is the header: the site of row MaxReplacedSites is the first
	// past the bound.
	if ue.Rule != RuleTooManySites || ue.Line != MaxReplacedSites+2 || ue.Column != "site" ||
		!strings.Contains(ue.Message, fmt.Sprintf("%q", rows[MaxReplacedSites][0])) || !strings.Contains(ue.Message, "(1 events") {
		t.Errorf("upload error %+v", ue)
	}
	if n := len(e.blobIDs(t)); n != blobs {
		t.Errorf("a refused upload stored %d blobs", n-blobs)
	}
	if v, _ := e.s.Version(ctx, "lab", "wide", 0); v.Number != 1 {
		t.Errorf("latest version %d after the refusal, want 1", v.Number)
	}
	// At the bound: accepted, every site replaced.
	res, err = e.ingestOpt(t, "lab", "wide", csvBytes(header, rows[:MaxReplacedSites]), IngestOptions{Mode: ModeReplaceWindow, From: from, To: to})
	if err != nil || res.Version == nil || res.Version.Manifest == nil || len(res.Version.Manifest.Lineage.Sites) != MaxReplacedSites {
		t.Fatalf("at the bound: err %v, version %+v", err, res)
	}
	listed := make([]string, MaxReplacedSites+1)
	for i := range listed {
		listed[i] = fmt.Sprintf("x%d", i)
	}
	_, err = e.ingestOpt(t, "lab", "wide", csvBytes(header, first), IngestOptions{Mode: ModeReplaceWindow, From: from, To: to, Sites: listed})
	if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "more than the 4096") {
		t.Errorf("%d sites listed: err %v, want ErrInvalid naming the bound", len(listed), err)
	}
}
