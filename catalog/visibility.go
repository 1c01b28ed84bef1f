package catalog

import (
	"context"
	"encoding/json"
	"fmt"
	"strconv"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
)

// retracted is the error of the data of a retracted version: it is
// ErrRetracted, with the sentence a reader is shown.
type retracted struct{ v *Version }

func (e retracted) Error() string {
	return "version " + strconv.Itoa(e.v.Number) + " of " + e.v.Dataset.String() + " was retracted on " + e.v.RetractedAt.Format(time.RFC3339) +
		": " + e.v.RetractReason + "; its metadata and citation stay readable"
}

func (e retracted) Unwrap() error { return ErrRetracted }

// Servable is nil when v's data may be served (its files, exports,
// summaries, bundles, diffs), and ErrRetracted, naming when and why, when
// v was retracted: a retracted version's metadata and citation stay
// readable, its data does not.
func (v *Version) Servable() error {
	if v.State == StateRetracted {
		return retracted{v}
	}
	return nil
}

// ServableVersion is Resolve for a version's data: the version sel names
// as a reader who sees drafts or not sees it, with its manifest, or
// ErrRetracted.
func (s *Store) ServableVersion(ctx context.Context, project, dataset string, sel Selector, drafts bool) (*Version, error) {
	v, err := s.Resolve(ctx, project, dataset, sel, drafts)
	if err != nil {
		return nil, err
	}
	if err := v.Servable(); err != nil {
		return nil, err
	}
	return v, nil
}

// Unpublished are the numbers of a dataset's versions never published,
// whose uploads, trend points and alerts a reader who does not see drafts
// does not see either; nil when drafts (the reader sees them all).
func (s *Store) Unpublished(ctx context.Context, project, dataset string, drafts bool) (map[int]bool, error) {
	if drafts {
		return nil, nil
	}
	heads, err := s.Heads(ctx, project, dataset)
	if err != nil {
		return nil, err
	}
	unseen := map[int]bool{}
	for _, h := range heads {
		if !h.Visible(false) {
			unseen[h.Number] = true
		}
	}
	return unseen, nil
}

// VisibleTrend is Trend as a reader sees it: without the points and
// alerts of versions never published, unless drafts.
func (s *Store) VisibleTrend(ctx context.Context, project, dataset, site string, drafts bool) ([]TrendPoint, []UploadAlert, error) {
	points, alerts, err := s.Trend(ctx, project, dataset, site)
	if err != nil {
		return nil, nil, err
	}
	unseen, err := s.Unpublished(ctx, project, dataset, drafts)
	if err != nil || len(unseen) == 0 {
		return points, alerts, err
	}
	ps, as := []TrendPoint{}, []UploadAlert{}
	for _, p := range points {
		if !unseen[p.Version] {
			ps = append(ps, p)
		}
	}
	for _, a := range alerts {
		if !unseen[a.Version] {
			as = append(as, a)
		}
	}
	return ps, as, nil
}

// VisibleUploads is Uploads as a reader sees them: without the uploads of
// versions never published, unless drafts.
func (s *Store) VisibleUploads(ctx context.Context, project, dataset string, drafts bool) ([]Upload, error) {
	ups, err := s.Uploads(ctx, project, dataset)
	if err != nil {
		return nil, err
	}
	unseen, err := s.Unpublished(ctx, project, dataset, drafts)
	if err != nil {
		return nil, err
	}
	out := []Upload{}
	for _, u := range ups {
		if !unseen[u.Version] {
			out = append(out, u)
		}
	}
	return out, nil
}

// DecodedSummary returns version v's stored summary, decoded (see
// Summary).
func (s *Store) DecodedSummary(ctx context.Context, v *Version) (*summary.Summary, error) {
	b, err := s.Summary(ctx, v.Dataset.String(), v.Number)
	if err != nil {
		return nil, err
	}
	var sum summary.Summary
	if err := json.Unmarshal(b, &sum); err != nil {
		return nil, fmt.Errorf("catalog: summary of %s@%d: %w", v.Dataset, v.Number, err)
	}
	return &sum, nil
}
