package pgcluster

import (
	"context"
	"errors"
	"fmt"
	"io"
	"regexp"
	"strconv"
)

// slotName is what PostgreSQL accepts as a replication slot's name.
var slotName = regexp.MustCompile(`^[a-z0-9_]{1,63}$`)

// StartReplica starts a streaming replica of the running cluster c, as a
// deployment's hot standby is made: pg_basebackup -R copies c's data over a
// replication connection with the WAL streamed alongside (so the copy is
// consistent without stopping c) and writes the standby settings
// (standby.signal, primary_conninfo); the physical replication slot named slot,
// created by the same command, keeps on c the WAL the replica has not received
// yet, so a replica stopped for a while catches up when restarted. The replica
// runs as a hot standby on a port of its own and answers read-only queries with
// c's users and passwords. It is always a throwaway cluster: its Stop stops it,
// removes its files and drops its slot on c (when c still runs). Crash and
// Restart work on it as on any cluster.
//
// wal_level = replica and max_wal_senders are PostgreSQL's defaults, and
// initdb's pg_hba.conf admits replication connections from 127.0.0.1 with the
// cluster's own method, so c needs no change.
func (c *Cluster) StartReplica(ctx context.Context, slot string) (*Cluster, error) {
	if !slotName.MatchString(slot) {
		return nil, fmt.Errorf("pgcluster: replication slot name %q: want 1 to 63 of a-z, 0-9 and _", slot)
	}
	if c.pid == 0 || !processAlive(c.pid) {
		return nil, errors.New("pgcluster: a replica needs its primary running")
	}
	pl, err := placeThrowaway(c.acct)
	if err != nil {
		return nil, fmt.Errorf("pgcluster: preparing the replica's directory: %w", err)
	}
	r := &Cluster{
		DataDir: pl.dataDir, RealDir: pl.realDir,
		User: c.User, Password: c.Password,
		Throwaway: true, Binaries: c.Binaries,
		acct: c.acct, log: c.log, tempBase: pl.tempBase,
		primary: c, slot: slot,
	}
	fmt.Fprintf(c.log, "pgcluster: copying the cluster on port %d into %s (pg_basebackup, slot %s)\n", c.Port, r.RealDir, slot)
	if err := c.replicationCommand(ctx, "pg_basebackup", "-D", r.RealDir, "-R", "-X", "stream", "-C", "-S", slot,
		"--checkpoint=fast", "--no-sync"); err != nil {
		r.primary = nil // the slot may not exist; there is nothing to drop
		return nil, errors.Join(err, r.Stop())
	}
	if err := r.start(ctx, 0); err != nil {
		return nil, errors.Join(err, r.Stop())
	}
	return r, nil
}

// replicationCommand runs one of PostgreSQL's replication clients
// (pg_basebackup, pg_receivewal) against c as its superuser over TCP, with the
// password, if any, in the environment rather than on the command line.
func (c *Cluster) replicationCommand(ctx context.Context, program string, args ...string) error {
	args = append([]string{"-h", "127.0.0.1", "-p", strconv.Itoa(c.Port), "-U", c.User, "-w"}, args...)
	out := newTailBuffer(8 << 10)
	cmd := c.acct.command(ctx, c.RealDir, c.Binaries.Path(program), args...)
	if c.Password != "" {
		cmd.Env = append(cmd.Env, "PGPASSWORD="+c.Password)
	}
	cmd.Stdout = io.MultiWriter(c.log, out)
	cmd.Stderr = cmd.Stdout
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("pgcluster: %s: %w\n%s", program, err, out.lastLines(errorLogLines))
	}
	return nil
}

// dropSlot removes a replica's slot from its primary, so that the primary stops
// keeping WAL for it; a primary that no longer runs keeps its slot.
func (c *Cluster) dropSlot(ctx context.Context) error {
	p := c.primary
	if p == nil || p.pid == 0 || !processAlive(p.pid) {
		return nil
	}
	return p.replicationCommand(ctx, "pg_receivewal", "--drop-slot", "--slot="+c.slot)
}
