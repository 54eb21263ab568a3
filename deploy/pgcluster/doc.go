// Package pgcluster runs a private PostgreSQL cluster from the server binaries
// installed on the machine, for development and for the test harness.
//
// A private cluster keeps the developer's and the CI machine's system PostgreSQL
// (if any) untouched and needs no configuration: Start creates the cluster on
// first use, listens on 127.0.0.1 only and returns a URL to hand to the server or
// to the storage tests. A throwaway cluster (Options.Throwaway) trades durability
// for speed and disappears on Stop. Cluster.StartReplica adds a streaming hot
// standby of a running cluster (pg_basebackup -R over a replication slot), for
// tests of what reads from a replica.
//
// PostgreSQL refuses to run as root, which is how containers and CI usually run
// us. When the caller is root, initdb, pg_ctl and the server run as the
// "postgres" system user, and a cluster whose directory that user cannot reach
// (a checkout under /root, say) is placed under /var/lib/beamledger/clusters and
// linked from the requested directory, so a later run finds the same data.
//
// The package uses the standard library only, so that the harness that starts
// the database for every other package's tests depends on nothing it could break.
package pgcluster
