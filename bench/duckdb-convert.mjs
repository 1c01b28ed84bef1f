// Benchmark peer of bench/run.sh: DuckDB converts one CSV (header row,
// types inferred by DuckDB's own sniffer) to one zstd-compressed Parquet
// file, as a whole process. Prints the rows written and the process's peak
// resident set (kB) as "rows=N maxrss_kb=M".
//
//   node bench/duckdb-convert.mjs IN.csv OUT.parquet
import { DuckDBInstance } from '@duckdb/node-api';

const [input, output] = process.argv.slice(2);
if (!input || !output) {
  console.error('usage: node bench/duckdb-convert.mjs IN.csv OUT.parquet');
  process.exit(2);
}
const lit = (s) => "'" + s.replaceAll("'", "''") + "'";
const instance = await DuckDBInstance.create(':memory:');
const conn = await instance.connect();
const res = await conn.runAndReadAll(
  `COPY (SELECT * FROM read_csv(${lit(input)}, header = true)) TO ${lit(output)} (FORMAT parquet, COMPRESSION zstd)`,
);
const rows = res.getRows()[0]?.[0];
process.stdout.write(`rows=${rows} maxrss_kb=${process.resourceUsage().maxRSS}\n`);
