// Package query answers the questions a reader asks of a catalog's
// versions that need their files or several stored records: a summary
// under a filter, the difference between two versions with the deltas of
// their quality and summary, the facts a version's citation names, and
// the files of a version for an export. It is the catalog's side of the
// server's and the command line's reads, so that neither assembles them
// nor reaches into the blob store.
package query

import (
	"context"
	"errors"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/export"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
)

// Source is where the exports of st read a version's files, and stage
// what they merge.
func Source(st *catalog.Store) export.Source {
	return export.Source{Open: st.Blobs().Open, TempDir: st.TempDir()}
}

// Opener opens the files of st by their sha256.
func Opener(st *catalog.Store) export.Opener { return st.Blobs().Open }

// FilteredSummary is the summary of version v (with its manifest) under
// filter f, computed from its files: the sites and window filter the
// events, reading only the row groups they need; the queues and
// activities restrict the lists of queues and activities (a wait needs
// the case's arrival, which names no queue). Instants are binned in the
// dataset's zone (UTC when it names none the clock knows). A retracted
// version is ErrRetracted.
func FilteredSummary(ctx context.Context, st *catalog.Store, v *catalog.Version, f export.Filter) (*summary.Summary, export.Stats, error) {
	if err := v.Servable(); err != nil {
		return nil, export.Stats{}, err
	}
	d, err := st.Dataset(ctx, v.Dataset.Project, v.Dataset.Name)
	if err != nil {
		return nil, export.Stats{}, err
	}
	loc, err := time.LoadLocation(d.Timezone)
	if err != nil {
		loc = time.UTC
	}
	ev := export.Filter{From: f.From, To: f.To, Sites: f.Sites}
	acc, stats, err := export.Summarize(ctx, Source(st), v.Manifest.Files, ev, summary.Options{Location: loc})
	if err != nil {
		return nil, stats, err
	}
	return acc.SummaryFor(summary.Selection{Sites: f.Sites, Queues: f.Queues, Activities: f.Activities}), stats, nil
}

// Diff is the difference between two versions.
type Diff struct {
	From    VersionRef          `json:"from"`
	To      VersionRef          `json:"to"`
	Events  *export.DiffResult  `json:"events"`
	Quality map[string]float64  `json:"quality_delta"` // to minus from, per score (Quality.Delta)
	Summary map[string]*float64 `json:"summary_delta"` // to minus from, per headline figure (Headline)
}

// VersionRef names a version by number and snapshot.
type VersionRef struct {
	Version    int                `json:"version"`
	SnapshotID catalog.SnapshotID `json:"snapshot_id"`
}

// Compare is the difference from a to b (both with their manifests)
// under filter f: the events by content, per site and day, the quality
// scores' deltas and the headline figures' deltas. A retracted version is
// ErrRetracted.
func Compare(ctx context.Context, st *catalog.Store, a, b *catalog.Version, f export.Filter) (*Diff, error) {
	for _, v := range []*catalog.Version{a, b} {
		if err := v.Servable(); err != nil {
			return nil, err
		}
	}
	res, err := export.Diff(ctx, Source(st), a.Manifest.Files, b.Manifest.Files, export.DiffOptions{Filter: f})
	if err != nil {
		return nil, err
	}
	out := &Diff{
		From:   VersionRef{Version: a.Number, SnapshotID: a.SnapshotID},
		To:     VersionRef{Version: b.Number, SnapshotID: b.SnapshotID},
		Events: res,
	}
	var reps [2]*quality.Report
	for i, v := range []*catalog.Version{a, b} {
		if reps[i], err = st.Report(ctx, v); err != nil && !errors.Is(err, catalog.ErrNotFound) {
			return nil, err
		}
	}
	out.Quality = QualityDelta(reps[0], reps[1])
	var sums [2]*summary.Summary
	for i, v := range []*catalog.Version{a, b} {
		if sums[i], err = st.DecodedSummary(ctx, v); err != nil {
			return nil, err
		}
	}
	out.Summary = SummaryDelta(sums[0], sums[1])
	return out, nil
}

// Headline are the figures of a summary a diff compares, by the name a
// diff gives them (the member's path in the summary's JSON).
var Headline = []struct {
	Name  string
	Value func(*summary.Summary) float64
}{
	{"events", func(s *summary.Summary) float64 { return float64(s.Events) }},
	{"cases.value", func(s *summary.Summary) float64 { return s.Cases.Value }},
	{"subjects.value", func(s *summary.Summary) float64 { return s.Subjects.Value }},
	{"resources.value", func(s *summary.Summary) float64 { return s.Resources.Value }},
	{"arrivals.total", func(s *summary.Summary) float64 { return float64(s.Arrivals.Total) }},
	{"length_of_stay.mean", func(s *summary.Summary) float64 { return s.LengthOfStay.Mean }},
	{"length_of_stay.p50", func(s *summary.Summary) float64 { return s.LengthOfStay.P50 }},
	{"length_of_stay.p90", func(s *summary.Summary) float64 { return s.LengthOfStay.P90 }},
	{"occupancy.peak", func(s *summary.Summary) float64 { return s.Occupancy.Peak }},
	{"occupancy.little.l", func(s *summary.Summary) float64 { return s.Occupancy.Little.L }},
	{"occupancy.little.lambda_w", func(s *summary.Summary) float64 { return s.Occupancy.Little.LambdaW }},
}

// SummaryDelta is b's headline figures minus a's; a figure is nil when
// either summary is missing.
func SummaryDelta(a, b *summary.Summary) map[string]*float64 {
	out := map[string]*float64{}
	for _, h := range Headline {
		if a == nil || b == nil {
			out[h.Name] = nil
			continue
		}
		d := h.Value(b) - h.Value(a)
		out[h.Name] = &d
	}
	return out
}

// QualityDelta is b's scores minus a's: the overall score ("score") and
// each dimension's, by name, where both reports have one.
func QualityDelta(a, b *quality.Report) map[string]float64 {
	scores := func(r *quality.Report) map[string]float64 {
		out := map[string]float64{}
		if r == nil {
			return out
		}
		if r.Score != nil {
			out["score"] = *r.Score
		}
		for _, d := range r.Dimensions {
			if d.Score != nil && d.Name != "" {
				out[d.Name] = *d.Score
			}
		}
		return out
	}
	sa, sb := scores(a), scores(b)
	out := map[string]float64{}
	for k, y := range sb {
		if x, ok := sa[k]; ok {
			out[k] = y - x
		}
	}
	return out
}

// CitationInput is what version v's CITATION.cff names: the dataset's
// title (else its reference), the version and snapshot, the release date,
// and the author: author when given (the lab that curates the data, a
// server's setting), else the project's title, else its name. The
// dataset's own metadata (creators, licence, ...) wins where set.
func CitationInput(ctx context.Context, st *catalog.Store, d *catalog.Dataset, v *catalog.Version, author string) export.CitationInput {
	if author == "" {
		if p, err := st.Project(ctx, d.Project); err == nil && p.Title != "" {
			author = p.Title
		} else {
			author = d.Project
		}
	}
	title := d.Title
	if title == "" {
		title = d.Ref().String()
	}
	ci := export.CitationInput{
		Title: title, Dataset: d.Ref().String(), Version: v.Number, SnapshotID: v.SnapshotID.String(),
		Released: v.CreatedAt, Authors: []export.Author{{Name: author}},
	}
	if m, err := st.DatasetMetadata(ctx, d.Project, d.Name); err == nil {
		ci = export.CitationFromMetadata(ci, m)
	}
	return ci
}
