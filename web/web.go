// Package web holds the pages and assets the server embeds: a landing page
// that says what the server is and where its API and schema live, and a
// version page that shows a version's state, quality and summary, read
// from the API with the reader's own token.
package web

import _ "embed"

// Index is the landing page served at /.
//
//go:embed index.html
var Index []byte

// Version is the page of one version, served at
// /view/{project}/{dataset}[/{version}]. It holds no data: its script asks
// the API with the token given in the URL fragment (#token=...), which the
// browser never sends to the server.
//
//go:embed version.html
var Version []byte
