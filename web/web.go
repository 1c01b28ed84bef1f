// Package web holds the pages and assets the server embeds. For now that
// is one landing page that says what the server is and where its API and
// schema live.
package web

import _ "embed"

// Index is the landing page served at /.
//
//go:embed index.html
var Index []byte
