package catalog

import (
	"bytes"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/quality"
)

// TestCapacityFromProfile: a chat agent holding three chats at once is no
// resource overlap where the dataset's profile gives the chat queue a
// capacity of three, and two overlaps (the second and third chat, worked
// out by hand) where it gives none; the report says the capacity and the
// most held at once.
func TestCapacityFromProfile(t *testing.T) {
	const fields = "fields:\n  site: {value: line}\n  case_id: c\n  event_type: t\n  occurred_at: at\n  queue: q\n  resource_id: r\n  activity: a\n"
	data := []byte("c,t,at,q,r,a\n" +
		"c1,start,2026-05-04T09:00:00Z,chat,agent-1,reply\n" +
		"c2,start,2026-05-04T09:01:00Z,chat,agent-1,reply\n" +
		"c3,start,2026-05-04T09:02:00Z,chat,agent-1,reply\n" +
		"c1,complete,2026-05-04T09:10:00Z,chat,agent-1,reply\n" +
		"c2,complete,2026-05-04T09:11:00Z,chat,agent-1,reply\n" +
		"c3,complete,2026-05-04T09:12:00Z,chat,agent-1,reply\n")
	e := newEnv(t, nil)
	e.dataset(t, "p", "set", func(s *DatasetSpec) { s.Profile = []byte("capacity:\n  queues: {chat: 3}\n" + fields) })
	e.dataset(t, "p", "unset", func(s *DatasetSpec) { s.Profile = []byte(fields) })
	set := e.report(t, e.ingest(t, "p", "set", data, "chats.csv").Version)
	unset := e.report(t, e.ingest(t, "p", "unset", data, "chats.csv").Version)
	if n := set.Count(quality.CodeResourceOverlap); n != 0 {
		t.Errorf("chat capacity 3: %d overlaps, want 0", n)
	}
	if n := unset.Count(quality.CodeResourceOverlap); n != 2 {
		t.Errorf("no capacity: %d overlaps, want 2", n)
	}
	if p := set.Raw.CapacityPeaks; len(p) != 1 || p[0].Queue != "chat" || p[0].Capacity != 3 || p[0].Peak != 3 {
		t.Errorf("capacity peaks %+v, want chat: capacity 3, peak 3", p)
	}
	var b bytes.Buffer
	if err := set.Text(&b, false); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "queue chat: capacity 3 (set); at most 3 at once (in the data)") {
		t.Errorf("text report:\n%s", b.String())
	}
}
