// Test-only: runs the SQL given as the first argument with DuckDB in the
// current folder and prints the result rows as JSON (every value as text),
// the way the DuckDB one-liner of a bundle's README runs in its folder.
import { DuckDBInstance } from '@duckdb/node-api';

const instance = await DuckDBInstance.create(':memory:');
const conn = await instance.connect();
const res = await conn.runAndReadAll(process.argv[2]);
const names = res.columnNames();
const rows = res.getRows().map((r) => Object.fromEntries(r.map((v, i) => [names[i], v === null ? null : String(v)])));
process.stdout.write(JSON.stringify(rows));
