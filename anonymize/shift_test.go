package anonymize

import (
	"testing"
	"time"
)

func TestTimeShift(t *testing.T) {
	p := newPseudonymizer("k1", make([]byte, ProjectKeySize))
	q := newPseudonymizer("k2", append(make([]byte, ProjectKeySize-1), 1))
	seen := map[time.Duration]bool{}
	differ := 0
	for i := range 2000 {
		s := p.Pseudonym("subject_id", string(rune('a'+i%26))+string(rune('a'+i/26)))
		d := p.TimeShift(s, 30)
		if d != p.TimeShift(s, 30) {
			t.Fatal("the same subject got two offsets")
		}
		if d%(24*time.Hour) != 0 || d < -30*24*time.Hour || d > 0 {
			t.Fatalf("offset %v is not whole days from -30 to 0", d)
		}
		seen[d] = true
		if q.TimeShift(s, 30) != d {
			differ++
		}
	}
	// 2,000 subjects over 31 offsets: every offset taken (the chance that
	// one is missed is below 31*(30/31)^2000, about 1e-27).
	if len(seen) != 31 {
		t.Errorf("%d distinct offsets of 31", len(seen))
	}
	// Another key gives other offsets (equal by chance 1 time in 31).
	if differ < 1800 {
		t.Errorf("another key gave the same offset for %d of 2000 subjects", 2000-differ)
	}
	if p.TimeShift("x", 0) != 0 || p.TimeShift("", 30) != 0 {
		t.Error("no shift asked, or no subject, must give 0")
	}
}
