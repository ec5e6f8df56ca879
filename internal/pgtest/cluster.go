package pgtest

import (
	"context"

	"github.com/curvewatch/curvewatch/internal/pgcluster"
)

// Cluster is a throwaway PostgreSQL cluster (see package pgcluster, which
// the binary uses too: this package links package testing).
type Cluster = pgcluster.Cluster

// StartCluster creates and starts a throwaway cluster whose directory is
// named curvewatch-pgtest-…. The caller stops it with Stop; a watchdog
// process also stops and removes it when the test binary exits, however it
// exits.
func StartCluster(ctx context.Context) (*Cluster, error) {
	return pgcluster.Start(ctx, pgcluster.Options{Prefix: "curvewatch-pgtest-"})
}
