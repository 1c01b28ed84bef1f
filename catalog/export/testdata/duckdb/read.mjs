// Test-only: prints, as JSON, what DuckDB reads from each Parquet file named
// on the command line: row count, and per column its DuckDB type and null
// count. catalog/export/engines_test.go compares it with Apache Arrow's Go
// reader.
import { DuckDBInstance } from '@duckdb/node-api';

const instance = await DuckDBInstance.create(':memory:');
const conn = await instance.connect();
const out = {};
for (const path of process.argv.slice(2)) {
  const lit = "'" + path.replaceAll("'", "''") + "'";
  const desc = await conn.runAndReadAll(`DESCRIBE SELECT * FROM read_parquet(${lit})`);
  const cols = desc.getRowObjects().map((r) => ({ name: r.column_name, type: r.column_type }));
  const parts = ['count(*) AS "__rows"', ...cols.map((c, i) => `count(*) - count("${c.name}") AS "n${i}"`)];
  const res = await conn.runAndReadAll(`SELECT ${parts.join(', ')} FROM read_parquet(${lit})`);
  const row = res.getRowObjects()[0];
  out[path] = {
    rows: Number(row.__rows),
    columns: cols.map((c, i) => ({ name: c.name, type: c.type, nulls: Number(row['n' + i]) })),
  };
}
process.stdout.write(JSON.stringify(out));
