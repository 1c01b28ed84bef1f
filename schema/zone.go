package schema

import (
	"fmt"
	"time"
)

// SetTimezone sets the IANA zone in which the profile reads wall-clock
// times, overriding the one it was parsed with. "Local" is refused: a
// catalog must not depend on the zone of the machine it runs on.
func (p *Profile) SetTimezone(name string) error {
	if name == "" || name == "Local" {
		return fmt.Errorf("timezone %q: want an IANA zone name such as Europe/Amsterdam or UTC", name)
	}
	loc, err := time.LoadLocation(name)
	if err != nil {
		return fmt.Errorf("timezone %q: not an IANA zone name (e.g. Europe/Amsterdam, America/New_York, UTC)", name)
	}
	p.Timezone = loc.String()
	p.loc = loc
	return nil
}
