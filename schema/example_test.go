package schema_test

import (
	"fmt"
	"io"
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

func ExampleNewReader() {
	p, err := schema.ParseProfile([]byte(`
delimiter: ";"
timezone: Europe/Amsterdam
fields:
  site: {value: north-clinic}
  case_id: Visit No
  event_type: {column: Code, codes: {ARR: arrival, TRI: start}}
  occurred_at: {column: When, layout: "%d-%m-%Y %H:%M"}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	src := "Visit No;Code;When\n" +
		"v-17;ARR;01-06-2021 08:00\n" +
		"v-17;XXX;01-06-2021 08:05\n" +
		"v-17;TRI;31-10-2021 02:30\n"
	r, err := schema.NewReader(strings.NewReader(src), p, schema.ReaderOptions{Name: "export.csv"})
	if err != nil {
		fmt.Println(err)
		return
	}
	for {
		var e schema.Event
		rej, err := r.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil {
			fmt.Println(err)
			return
		}
		if rej != nil {
			fmt.Println(rej.Reason, "at line", rej.Line)
			continue
		}
		fmt.Println(e.Type, e.OccurredAt.Format("2006-01-02T15:04:05Z07:00"))
	}
	// Output:
	// arrival 2021-06-01T06:00:00Z
	// unknown_code at line 3
	// ambiguous_local at line 4
}
