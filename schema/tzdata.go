package schema

// The embedded IANA time-zone database makes profile zones such as
// Europe/Amsterdam load on machines without /usr/share/zoneinfo.
import _ "time/tzdata"
