package summary

import (
	"math/rand/v2"
	"testing"
	"time"
)

// TestExposureClosedForm checks the closed-form hour count against a
// plain walk over every real hour, each credited to the local weekday
// and hour its start falls in (time.Time.Weekday and Hour, standard
// library), in zones with daylight saving, a half-hour offset and a
// half-hour daylight shift, over stretches from an hour to years, past
// the zones' tables too (to 2060).
func TestExposureClosedForm(t *testing.T) {
	zones := []string{"UTC", "Europe/Berlin", "America/New_York", "Asia/Kolkata", "Australia/Lord_Howe", "America/St_Johns"}
	rng := rand.New(rand.NewPCG(7, 9))
	const hour = int64(time.Hour / time.Microsecond)
	for _, z := range zones {
		loc, err := time.LoadLocation(z)
		if err != nil {
			t.Fatal(err)
		}
		for trial := range 40 {
			a := New(Options{Location: loc})
			from := rng.Int64N(110*365*24*hour) + int64(1950-1970)*365*24*hour
			span := []int64{0, 59 * 60 * 1e6, rng.Int64N(30 * 24 * hour), rng.Int64N(3 * 365 * 24 * hour)}[trial%4]
			a.days = observed{{from: from, to: from + span}}
			if trial%10 == 9 { // a second stretch far later
				f2 := from + span + 400*24*hour
				a.days = append(a.days, dayRange{from: f2, to: f2 + rng.Int64N(200*24*hour)})
			}
			total, week := a.exposure()
			var wantTotal int
			var want [168]int
			for _, r := range a.days {
				for h := floorDiv(r.from, hour); h <= floorDiv(r.to, hour); h++ {
					lt := time.UnixMicro(h * hour).In(loc)
					how := (int(lt.Weekday())+6)%7*24 + lt.Hour() // Monday 00:00 is 0
					want[how]++
					wantTotal++
				}
			}
			if total != wantTotal || week != want {
				t.Fatalf("%s trial %d: %d hours, want %d; week differs: %v", z, trial, total, wantTotal, week != want)
			}
		}
	}
}

// TestExposureCenturies: a stretch of eight centuries (a state may hold
// one) is counted without walking its seven million hours one by one.
func TestExposureCenturies(t *testing.T) {
	loc, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Fatal(err)
	}
	a := New(Options{Location: loc})
	from := time.Date(1500, 1, 1, 0, 0, 0, 0, time.UTC).UnixMicro()
	to := time.Date(2300, 1, 1, 0, 0, 0, 0, time.UTC).UnixMicro()
	a.days = observed{{from: from, to: to}}
	total, week := a.exposure()
	if want := int((to-from)/int64(time.Hour/time.Microsecond)) + 1; total != want {
		t.Fatalf("%d hours, want %d", total, want)
	}
	var sum int
	for _, n := range week {
		sum += n
	}
	if sum != total {
		t.Fatalf("week sums to %d, total %d", sum, total)
	}
}

// TestStateStretchRange: a stored state whose observed stretch lies
// outside the years the schema reads is refused as corrupt (it can only
// be crafted), and one inside them is read back.
func TestStateStretchRange(t *testing.T) {
	const hour = int64(time.Hour / time.Microsecond)
	for _, c := range []struct {
		from int64
		ok   bool
	}{
		{time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC).UnixMicro(), true},
		{time.Date(9999, 12, 31, 0, 0, 0, 0, time.UTC).UnixMicro(), true},
		{maxInstant + hour, false},
		{minInstant - 2*hour, false},
	} {
		a := New(Options{})
		a.ObserveAll(farEvents(false, "a"))
		a.endStretch()
		a.days = observed{{first: int32(floorDiv(c.from, 86400e6)), last: int32(floorDiv(c.from, 86400e6)), from: c.from, to: c.from + hour}}
		b, err := a.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		var x Accumulator
		err = x.UnmarshalBinary(b)
		if (err == nil) != c.ok {
			t.Errorf("stretch at %v: read error %v, want ok=%v", time.UnixMicro(c.from).UTC(), err, c.ok)
		}
	}
}
