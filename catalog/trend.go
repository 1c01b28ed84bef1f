package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"slices"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/quality"
)

// driftHistory is how many earlier uploads, at most, the drift check reads
// back to find the history of the sites of a new upload.
const driftHistory = 500

// driftAlerts compares an upload's report with the recent accepted uploads
// of the same sites (quality.Drift: the last 14 points of each site) and
// returns the alerts. It reads uploads newest first and stops when every
// site of the upload has a full window or after driftHistory uploads.
func driftAlerts(tx *bolt.Tx, ref string, up *Upload) []quality.Alert {
	if !judged(up) {
		return nil
	}
	cur := withEvents(quality.TrendPoints(up.ID.String(), up.Seq, up.ReceivedAt, up.Report))
	need := map[string]int{}
	for _, p := range cur {
		need[p.Site] = 14
	}
	var history []quality.TrendPoint
	c := tx.Bucket(bucketUploads).Cursor()
	prefix := []byte(ref + "/")
	// Start at the last key before this upload's (which is not stored yet).
	var k, v []byte
	if sk, _ := c.Seek(seqKey(ref, up.Seq)); sk == nil {
		k, v = c.Last()
	} else {
		k, v = c.Prev()
	}
	for n := 0; k != nil && bytes.HasPrefix(k, prefix) && n < driftHistory && len(need) > 0; k, v = c.Prev() {
		n++
		var old Upload
		if json.Unmarshal(v, &old) != nil || old.Seq >= up.Seq || old.Status != UploadAccepted || old.Report == nil {
			continue
		}
		for _, p := range withEvents(quality.TrendPoints(old.ID.String(), old.Seq, old.ReceivedAt, old.Report)) {
			if need[p.Site] > 0 {
				history = append(history, p)
				if need[p.Site]--; need[p.Site] == 0 {
					delete(need, p.Site)
				}
			}
		}
	}
	var alerts []quality.Alert
	for _, p := range cur {
		alerts = append(alerts, quality.Drift(history, p, quality.DriftOptions{})...)
	}
	return alerts
}

// judged reports whether up has a report that judged events: not none,
// and not a duplicate's rows and rejections alone (quality.Report.RowsOnly).
func judged(up *Upload) bool { return up.Report != nil && !up.Report.RowsOnly }

// withEvents drops the points of sites with no event in the report: a
// site whose events of the upload were all held already (or all invalid)
// has nothing to compare, and its shares would read 0.
func withEvents(ps []quality.TrendPoint) []quality.TrendPoint {
	return slices.DeleteFunc(ps, func(p quality.TrendPoint) bool { return p.Events == 0 })
}

// TrendPoint is one upload's quality at one site (or all sites, "*"),
// with its status.
type TrendPoint struct {
	quality.TrendPoint
	Status  UploadStatus `json:"status"`
	Version int          `json:"version,omitempty"` // the version the upload made or matched
}

// UploadAlert is a drift alert with the upload it was raised for.
type UploadAlert struct {
	Upload     UploadID `json:"upload"`
	Seq        int      `json:"seq"`
	Version    int      `json:"version,omitempty"`
	ReceivedAt string   `json:"received_at"`
	quality.Alert
}

// Trend returns the quality of every upload with a report (accepted or
// rejected; not a duplicate, whose events were judged before), oldest
// first, at site (every site and the all-sites point when site is empty),
// and the alerts raised, newest first.
func (s *Store) Trend(ctx context.Context, project, dataset, site string) ([]TrendPoint, []UploadAlert, error) {
	ups, err := s.Uploads(ctx, project, dataset)
	if err != nil {
		return nil, nil, err
	}
	points := []TrendPoint{}
	alerts := []UploadAlert{}
	for _, up := range ups {
		// A report of rows only makes no point, but the upload's alerts
		// (a jump in the held share) are listed.
		if judged(&up) {
			for _, p := range quality.TrendPoints(up.ID.String(), up.Seq, up.ReceivedAt, up.Report) {
				if site == "" || p.Site == site {
					points = append(points, TrendPoint{TrendPoint: p, Status: up.Status, Version: up.Version})
				}
			}
		}
		for _, a := range up.Alerts {
			if site == "" || a.Site == site {
				alerts = append(alerts, UploadAlert{Upload: up.ID, Seq: up.Seq, Version: up.Version, ReceivedAt: up.ReceivedAt.Format("2006-01-02T15:04:05Z07:00"), Alert: a})
			}
		}
	}
	slices.Reverse(alerts)
	return points, alerts, nil
}
