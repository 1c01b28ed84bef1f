package export

import (
	"fmt"
	"strings"
)

// LoadLine is one way to load a pulled or unpacked version into an
// analysis tool: a one-line command run in the version's folder (the one
// holding data/ and cases/).
type LoadLine struct {
	Tool    string // the tool, as a reader knows it
	Needs   string // what to install
	Command string
}

// LoadLines returns the one-liners the bundle's README and flowcat pull
// print, for a dataset whose wall-clock zone is zone (IANA; "" or "UTC"
// for UTC). Each reads every event file of data/ (a version's files are
// read together), keeps occurred_at as the UTC instant it is stored as,
// and adds local_time, the same instant on the dataset's wall clock. The
// DuckDB line is run for real by the tests; the others are checked for
// their syntax only (see DEVELOPERS.md).
func LoadLines(zone string) []LoadLine {
	if zone == "" {
		zone = "UTC"
	}
	// Zone names are IANA names (letters, digits, "/", "_", "-", "+"):
	// safe inside the quotes below.
	z := strings.Map(func(r rune) rune {
		if r == '\'' || r == '"' || r == '\\' || r == '$' || r == '`' {
			return -1
		}
		return r
	}, zone)
	return []LoadLine{
		{
			Tool:    "DuckDB",
			Needs:   "the duckdb command (duckdb.org)",
			Command: fmt.Sprintf(`duckdb -c "SELECT *, timezone('%s', occurred_at) AS local_time FROM read_parquet('data/*.parquet') ORDER BY occurred_at LIMIT 10"`, z),
		},
		{
			Tool:    "Polars",
			Needs:   "pip install polars",
			Command: fmt.Sprintf(`python3 -c "import polars as pl; df = pl.read_parquet('data/*.parquet').with_columns(local_time=pl.col('occurred_at').dt.convert_time_zone('%s')); print(df)"`, z),
		},
		{
			Tool:    "pandas (pyarrow)",
			Needs:   "pip install pandas pyarrow",
			Command: fmt.Sprintf(`python3 -c "import pyarrow.dataset as ds; df = ds.dataset('data', format='parquet').to_table().to_pandas(); df['local_time'] = df['occurred_at'].dt.tz_convert('%s'); print(df)"`, z),
		},
		{
			Tool:    "R (arrow)",
			Needs:   `install.packages(c("arrow", "dplyr"))`,
			Command: fmt.Sprintf(`Rscript -e 'df <- dplyr::collect(arrow::open_dataset("data")); df$local_time <- df$occurred_at; attr(df$local_time, "tzone") <- "%s"; print(head(df))'`, z),
		},
	}
}
