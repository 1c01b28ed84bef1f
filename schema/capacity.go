package schema

import (
	"fmt"
	"strconv"

	"github.com/goccy/go-yaml/ast"
)

// Capacity declares how many cases one resource may serve at once where
// that differs from the profile's resource_capacity: by the queue a
// service starts from (a chat line's agents hold three chats at once, its
// phone agents one call), or for one resource. A resource's own entry
// comes first, then the queue named on the start, then
// resource_capacity.
//
// Resources are named by their pseudonym, as snapshots, case tables and
// reports show them, never by the partner's raw id: a profile is stored,
// and raw identifiers never reach disk. A key that is not shaped like a
// pseudonym (26 characters of the lower-case base32 alphabet) is refused.
type Capacity struct {
	Queues    map[string]int `json:"queues,omitempty"`
	Resources map[string]int `json:"resources,omitempty"`
}

// Capacity bounds.
const (
	MaxCapacity        = 1000 // cases one resource may serve at once
	maxCapacityEntries = 4096 // entries under capacity.queues or capacity.resources
)

// Of returns the capacity of resource (a pseudonym) serving from queue:
// the resource's own, else the queue's, else def.
func (c *Capacity) Of(resource, queue string, def int) int {
	if c == nil {
		return def
	}
	if n, ok := c.Resources[resource]; ok {
		return n
	}
	if n, ok := c.Queues[queue]; ok {
		return n
	}
	return def
}

// capacitySetting reads the capacity key: a mapping of queues and
// resources, each a mapping of name to a whole number.
func capacitySetting(n ast.Node, lines map[string]int) (*Capacity, error) {
	top, err := mapping(n, "capacity")
	if err != nil {
		return nil, err
	}
	c := &Capacity{}
	for _, kv := range top {
		key := "capacity." + kv.key
		lines[key] = kv.line
		var into *map[string]int
		switch kv.key {
		case "queues":
			into = &c.Queues
		case "resources":
			into = &c.Resources
		default:
			return nil, &ProfileError{Line: kv.line, Key: key, Msg: "unknown key (want queues or resources)"}
		}
		entries, err := mapping(kv.value, key)
		if err != nil {
			return nil, err
		}
		*into = make(map[string]int, len(entries))
		for _, e := range entries {
			k := key + "." + e.key
			lines[k] = e.line
			if kv.key == "resources" {
				// The key is not quoted back: it may be a raw id typed by
				// mistake.
				k = key
			}
			s, err := scalar(e.value, k)
			if err != nil {
				return nil, err
			}
			v, err := strconv.Atoi(s)
			if err != nil {
				return nil, &ProfileError{Line: e.line, Key: k, Msg: fmt.Sprintf("%q: want a whole number from 1 to %d", clip(s), MaxCapacity)}
			}
			(*into)[e.key] = v
		}
	}
	return c, nil
}

// validateCapacity checks c; at reports at a dotted key.
func validateCapacity(c *Capacity, at func(key, msg string) error) error {
	if c == nil {
		return nil
	}
	if len(c.Queues) > maxCapacityEntries || len(c.Resources) > maxCapacityEntries {
		return at("capacity", fmt.Sprintf("at most %d queues and %d resources", maxCapacityEntries, maxCapacityEntries))
	}
	for q, n := range c.Queues {
		if q == "" {
			return at("capacity.queues", "a queue name is empty")
		}
		if n < 1 || n > MaxCapacity {
			return at("capacity.queues."+q, fmt.Sprintf("want a whole number from 1 to %d", MaxCapacity))
		}
	}
	for r, n := range c.Resources {
		if !pseudonymShaped(r) {
			// Never quoted: it may be a raw identifier.
			return at("capacity.resources", "name each resource by its pseudonym (26 characters a-z and 2-7, as snapshots and reports show it), never by its raw id")
		}
		if n < 1 || n > MaxCapacity {
			return at("capacity.resources", fmt.Sprintf("want a whole number from 1 to %d", MaxCapacity))
		}
	}
	return nil
}

// pseudonymShaped reports whether s has the shape of a pseudonym (26
// characters of RFC 4648 base32 in lower case; see anonymize).
func pseudonymShaped(s string) bool {
	if len(s) != 26 {
		return false
	}
	for i := 0; i < len(s); i++ {
		if c := s[i]; !(c >= 'a' && c <= 'z' || c >= '2' && c <= '7') {
			return false
		}
	}
	return true
}
