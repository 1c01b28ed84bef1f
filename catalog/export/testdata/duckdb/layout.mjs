// Test-only: reads a partitioned layout written by `flowcat export --layout`
// and the directory a `flowcat pull` of the same version wrote, and prints
// as JSON: the rows of each, the rows of each that the other lacks (as
// multisets, EXCEPT ALL over every column of the pull), the types DuckDB
// gives the partition columns, and what EXPLAIN ANALYZE of a query on one
// site and date reports of the files it scanned and read.
// Usage: node layout.mjs LAYOUT_DIR PULL_DIR SITE DATE
import { DuckDBInstance } from '@duckdb/node-api';

const [layoutDir, pullDir, site, date] = process.argv.slice(2);
const lit = (s) => "'" + s.replaceAll("'", "''") + "'";
const instance = await DuckDBInstance.create(':memory:');
const conn = await instance.connect();
await conn.run(`CREATE VIEW layout AS SELECT * FROM read_parquet(${lit(layoutDir + '/**/*.parquet')}, hive_partitioning = true)`);
await conn.run(`CREATE VIEW pulled AS SELECT * FROM read_parquet(${lit(pullDir + '/data/*.parquet')})`);
const one = async (sql) => (await conn.runAndReadAll(sql)).getRows()[0];
const cols = (await conn.runAndReadAll('DESCRIBE pulled')).getRowObjects().map((r) => '"' + r.column_name + '"');
const types = Object.fromEntries((await conn.runAndReadAll('DESCRIBE layout')).getRowObjects().map((r) => [r.column_name, r.column_type]));
const list = cols.join(', ');
const out = {
  layout_rows: Number((await one('SELECT count(*) FROM layout'))[0]),
  pulled_rows: Number((await one('SELECT count(*) FROM pulled'))[0]),
  only_in_layout: Number((await one(`SELECT count(*) FROM (SELECT ${list} FROM layout EXCEPT ALL SELECT ${list} FROM pulled)`))[0]),
  only_in_pulled: Number((await one(`SELECT count(*) FROM (SELECT ${list} FROM pulled EXCEPT ALL SELECT ${list} FROM layout)`))[0]),
  site_type: types.site,
  date_type: types.date,
};
const where = `WHERE site = ${lit(site)} AND date = ${lit(date)}`;
out.partition_rows = Number((await one(`SELECT count(*) FROM layout ${where}`))[0]);
// EXPLAIN ANALYZE prints the plan as text boxes; its table scan reports
// "Scanning Files: n/N" and "Total Files Read: n" on lines of their own.
const plan = (await conn.runAndReadAll(`EXPLAIN ANALYZE SELECT count(*) FROM read_parquet(${lit(layoutDir + '/**/*.parquet')}, hive_partitioning = true) ${where}`))
  .getRows().map((r) => r.join('\n')).join('\n');
const scanning = plan.match(/Scanning Files:\s*(\d+)\/(\d+)/);
const read = plan.match(/Total Files Read:\s*(\d+)/);
out.scanning_files = scanning ? [Number(scanning[1]), Number(scanning[2])] : null;
out.files_read = read ? Number(read[1]) : null;
if (!scanning || !read) out.plan = plan;
process.stdout.write(JSON.stringify(out));
