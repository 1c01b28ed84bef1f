package catalog

import (
	"bytes"
	"encoding/json"
	"slices"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/quality"
)

// AlertHeldShareJump is the code of the alert raised when the share of an
// upload's events that were already held jumps above the site's own
// history: a partner that suddenly re-sends everything.
const AlertHeldShareJump = "held_share_jump"

// The held-share band: median + heldShareK · max(quality.MADScale · MAD,
// heldShareMinSpread) of the site's last heldShareWindow uploads, alerting
// only with at least heldShareMinHistory of them. A robust band of median
// and MAD, as the drift alerts use (common practice); the floor of 2
// points of share keeps a steady history from alerting on a few late
// events.
const (
	heldShareWindow     = 14
	heldShareMinHistory = 5
	heldShareK          = 3
	heldShareMinSpread  = 0.02
)

// heldShareAlerts compares the held share of each site of up with that
// site's earlier uploads (accepted or duplicate, with event counts), read
// newest first, at most driftHistory of them.
func heldShareAlerts(tx *bolt.Tx, ref string, up *Upload) []quality.Alert {
	if up.Events == nil || len(up.Events.Sites) == 0 {
		return nil
	}
	history := map[string][]float64{}
	need := 0
	for _, s := range up.Events.Sites {
		if s.Read > 0 {
			history[s.Site] = nil
			need++
		}
	}
	c := tx.Bucket(bucketUploads).Cursor()
	prefix := []byte(ref + "/")
	var k, v []byte
	if sk, _ := c.Seek(seqKey(ref, up.Seq)); sk == nil {
		k, v = c.Last()
	} else {
		k, v = c.Prev()
	}
	for n := 0; k != nil && bytes.HasPrefix(k, prefix) && n < driftHistory && need > 0; k, v = c.Prev() {
		n++
		var old Upload
		if json.Unmarshal(v, &old) != nil || old.Seq >= up.Seq || old.Events == nil ||
			old.Status != UploadAccepted && old.Status != UploadDuplicate {
			continue
		}
		for _, s := range old.Events.Sites {
			h, ok := history[s.Site]
			if !ok || len(h) == heldShareWindow || s.Read == 0 {
				continue
			}
			history[s.Site] = append(h, s.HeldShare())
			if len(h)+1 == heldShareWindow {
				need--
			}
		}
	}
	var out []quality.Alert
	for _, s := range up.Events.Sites {
		h := history[s.Site]
		if s.Read == 0 || len(h) < heldShareMinHistory {
			continue
		}
		med := median(h)
		dev := make([]float64, len(h))
		for i, x := range h {
			dev[i] = abs(x - med)
		}
		spread := max(quality.MADScale*median(dev), heldShareMinSpread)
		lo, hi := med-heldShareK*spread, med+heldShareK*spread
		now := s.HeldShare()
		if now <= hi {
			continue
		}
		out = append(out, quality.Alert{
			Code: AlertHeldShareJump, Site: s.Site, Metric: "held_share",
			Value: now, Median: med, Low: max(lo, 0), High: hi,
			Sentence: printer.Sprintf("%.1f%% of this upload's events (%d of %d) were already held, against a median of %.1f%% over the site's last %d uploads: the partner may be re-sending everything",
				100*now, s.Held, s.Read, 100*med, len(h)),
		})
	}
	return out
}

func median(xs []float64) float64 {
	s := slices.Clone(xs)
	slices.Sort(s)
	n := len(s)
	if n == 0 {
		return 0
	}
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}
