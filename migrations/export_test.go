package migrations

import "io/fs"

// Files exposes the embedded SQL files to the tests.
func Files() fs.FS { return files }
