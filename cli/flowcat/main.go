// Command flowcat is the catalog server and its command line: run
// `flowcat --help` for the commands.
package main

import (
	"context"
	"os"

	_ "time/tzdata" // IANA zones on machines without a zone database

	"github.com/flowcat-catalog/flowcat/cli"
)

func main() {
	os.Exit(cli.Main(context.Background(), os.Args[1:], os.Stdin, os.Stdout, os.Stderr))
}
