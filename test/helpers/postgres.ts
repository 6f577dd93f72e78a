/**
 * A database of a test's own on the machine's PostgreSQL (127.0.0.1:5432, trust auth, or
 * TRUESHIFT_TEST_PG_URL), created empty and dropped afterwards, so runs never see each other's rows.
 */
import { randomBytes } from 'node:crypto';
import pg from 'pg';

export const ADMIN_URL =
  process.env.TRUESHIFT_TEST_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/postgres';

export interface TestDatabase {
  name: string;
  url: string;
  drop(): Promise<void>;
}

export async function createTestDatabase(label: string): Promise<TestDatabase> {
  const name = `trueshift_${label}_${String(process.pid)}_${randomBytes(4).toString('hex')}`;
  const admin = new pg.Client({ connectionString: ADMIN_URL });
  await admin.connect();
  try {
    await admin.query(`CREATE DATABASE ${name}`);
  } finally {
    await admin.end();
  }
  const url = new URL(ADMIN_URL);
  url.pathname = `/${name}`;
  return {
    name,
    url: url.toString(),
    async drop() {
      const client = new pg.Client({ connectionString: ADMIN_URL });
      await client.connect();
      try {
        await client.query(`DROP DATABASE IF EXISTS ${name} WITH (FORCE)`);
      } finally {
        await client.end();
      }
    },
  };
}
