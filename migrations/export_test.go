package migrations

import (
	"context"
	"io/fs"
)

// Files exposes the embedded SQL files to the tests.
func Files() fs.FS { return files }

// Steps applies n migrations (n < 0 reverts -n), for the tests of one
// migration's data conversion.
func Steps(ctx context.Context, databaseURL, schema string, n int) error {
	db, err := open(ctx, databaseURL, schema)
	if err != nil {
		return err
	}
	if err := createSchema(ctx, db, schema); err != nil {
		db.Close()
		return err
	}
	m, err := newMigrate(db, schema)
	if err != nil {
		return err
	}
	defer m.Close()
	return run(ctx, m, func() error { return m.Steps(n) })
}
