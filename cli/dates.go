package cli

import (
	"context"
	"fmt"
	"io"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// dateOnly is the layout of a date without a time, RFC 3339's full-date.
const dateOnly = "2006-01-02"

// instantFlags turns date-only values of flags that ask for an instant
// (--from 2026-03-01) into the start of that day in the dataset's zone,
// and says so on w, so that the window is never a surprise. Values with a
// time are left for the server to check. It fetches the dataset only when
// some value is a date.
func instantFlags(ctx context.Context, cl *client, r ref, w io.Writer, flags ...*struct{ name, value string }) error {
	var zone *time.Location
	var zoneName string
	for _, f := range flags {
		day, err := time.Parse(dateOnly, f.value)
		if f.value == "" || err != nil {
			continue
		}
		if zone == nil {
			var d catalog.Dataset
			if err := cl.getJSON(ctx, r.path(), &d); err != nil {
				return usageErr("--%s %s: a date is taken in the dataset's zone, which could not be read (%v); give an RFC 3339 instant with its offset, such as %sT00:00:00Z",
					f.name, f.value, err, f.value)
			}
			zoneName = d.Timezone
			if zone, err = time.LoadLocation(d.Timezone); err != nil || d.Timezone == "" {
				zone, zoneName = time.UTC, "UTC"
			}
		}
		start := time.Date(day.Year(), day.Month(), day.Day(), 0, 0, 0, 0, zone)
		fmt.Fprintf(w, "--%s %s: taken as the start of that day in the dataset's zone, %s: %s\n",
			f.name, f.value, zoneName, start.Format(time.RFC3339))
		f.value = start.Format(time.RFC3339)
	}
	return nil
}

// resolveDates applies instantFlags to the filter's --from and --to.
func (f *filterFlags) resolveDates(ctx context.Context, cl *client, r ref, w io.Writer) error {
	from := &struct{ name, value string }{"from", f.from}
	to := &struct{ name, value string }{"to", f.to}
	if err := instantFlags(ctx, cl, r, w, from, to); err != nil {
		return err
	}
	f.from, f.to = from.value, to.value
	return nil
}

// windowInstant reads the value of a --window-from or --window-to flag:
// an RFC 3339 instant, or a date alone, taken as the start of that day in
// the zone zone() names and said on w.
func windowInstant(name, v string, zone func() (string, error), w io.Writer) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, v); err == nil {
		return t, nil
	}
	day, err := time.Parse(dateOnly, v)
	if err != nil {
		return time.Time{}, usageErr("--%s %q: want a date (2026-01-01, the start of that day in the dataset's zone) or an RFC 3339 instant like 2026-01-01T00:00:00Z", name, v)
	}
	zoneName, err := zone()
	if err != nil {
		return time.Time{}, usageErr("--%s %s: a date is taken in the dataset's zone, which could not be read (%v); give an RFC 3339 instant with its offset, such as %sT00:00:00Z", name, v, err, v)
	}
	if zoneName == "" {
		zoneName = "UTC"
	}
	loc, err := time.LoadLocation(zoneName)
	if err != nil {
		return time.Time{}, usageErr("--%s %s: the zone %q is not an IANA zone name", name, v, zoneName)
	}
	start := time.Date(day.Year(), day.Month(), day.Day(), 0, 0, 0, 0, loc)
	fmt.Fprintf(w, "--%s %s: taken as the start of that day in the dataset's zone, %s: %s\n", name, v, zoneName, start.Format(time.RFC3339))
	return start, nil
}

// instantFlag is a flag whose value is an RFC 3339 instant, and where it
// goes.
type instantFlag struct {
	flag, value string
	dst         *time.Time
}

// parseInstants parses the values given of flags as RFC 3339 instants
// into their destinations; a value that is not one is a usage error
// beginning with prefix and naming the flag and the value.
func parseInstants(prefix string, flags ...instantFlag) error {
	for _, f := range flags {
		if f.value == "" {
			continue
		}
		t, err := time.Parse(time.RFC3339Nano, f.value)
		if err != nil {
			return usageErr("%s%s %q: want an RFC 3339 instant, such as 2026-03-01T00:00:00Z", prefix, f.flag, f.value)
		}
		*f.dst = t
	}
	return nil
}
