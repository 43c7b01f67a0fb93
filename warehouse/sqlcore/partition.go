package sqlcore

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// Run partitions (Dialect.RunPartitions, Postgres): the per-unit run
// tables — cohort snapshot, scores, matches, weights and survival — are
// PARTITION BY LIST (run_id) with one partition per run, so that
// retention drops an expired run's rows with its partition instead of
// deleting them row by row (at 1M units the DELETE was half of the
// publish), and a current view, whose run_id filter is a scalar
// subquery, scans one partition only (the executor prunes the others
// once the subquery is known). Effects rows are a few per run and stay
// in a plain table.
//
// Existing warehouses keep their layout: a run table created plain by an
// earlier version is detected in the publishing transaction
// (table_kind.sql) and kept, with its run_id index and DELETE retention.
// Migrating it in place would rewrite every kept run's rows under an
// exclusive lock inside a publish; a study that wants the new layout
// drops (or renames) its run tables and the next run creates them
// partitioned.
//
// Locks. A new run's partition is created as a plain table and then
// attached, which takes SHARE UPDATE EXCLUSIVE on the parent (CREATE
// TABLE … PARTITION OF would take ACCESS EXCLUSIVE until commit and make
// every reader of the current views wait for the whole publish). Because
// that lock does not exclude readers, a reader's statement can plan with
// the partitions it saw and then take its snapshot after a concurrent
// attach committed. Were the attach part of the publishing transaction,
// such a statement would see the new run current but not its partition
// — an empty current view (TestFaultReadersDuringRepublish caught it).
// So StartRun attaches the run's empty partitions, in its own
// transaction, long before the publish makes the run current; only a
// study's first run, whose tables the publishing transaction creates,
// attaches them there (no earlier run is current then). A run that never
// publishes rows (failed, cancelled, abandoned, skipped) leaves empty
// partitions, which the next publish drops with the expired ones.
// Detaching or dropping a partition needs ACCESS EXCLUSIVE on the parent;
// retention takes it on all the parents at once, as the last writes
// before the commit, and waits at most partitionLockWait for it. If a
// reader holds a table that long (or a deadlock is detected), retention
// rolls back to its savepoint and deletes the expired runs' rows
// instead, as before; the emptied partitions, whose runs are gone from
// the runs table, are dropped by a later publish that gets the lock.
// Readers thus never wait longer than partitionLockWait for a publish.
//
// What remains: a read-committed transaction that holds a run table's
// lock from a statement before StartRun's attach and reads again after
// the publish may plan that one statement with its old partition list
// and see the new current run without rows. A dashboard that keeps one
// transaction open across a whole run uses REPEATABLE READ, which sees
// the previous run throughout.

// partitionLockWait bounds how long retention waits for the run tables'
// ACCESS EXCLUSIVE lock before falling back to DELETE. Longer than
// deadlock_timeout's default (1 s), so that an autovacuum of an old
// partition, which the server cancels when it blocks a lock request for
// that long, does not force the fallback.
const partitionLockWait = "3s"

// runTable is a run table of the open publishing transaction with its
// layout.
type runTable struct {
	name, quoted string // unquoted table name; quoted schema.table
	partitioned  bool
}

// partitionedTables lists the contract tables kept one partition per run
// on an engine with RunPartitions.
func partitionedTables(o *warehouse.Objects) map[*warehouse.Table]bool {
	m := map[*warehouse.Table]bool{&o.C.Cohort: true, &o.C.Scores: true, &o.C.Matches: true, &o.C.Weights: true}
	if o.C.Survival.Name != "" {
		m[&o.C.Survival] = true
	}
	return m
}

// PartitionName is the name of run runID's partition of table:
// deterministic, a valid identifier of at most MaxIdentLen bytes
// whatever the run id holds, and distinct per table and run. The table
// name (cut so that the whole fits) keeps it readable in the catalogue;
// the first 16 hex digits of SHA-256 of table and run id make it unique.
func PartitionName(table, runID string) (string, error) {
	sum := sha256.Sum256([]byte(table + "\x00" + runID))
	suffix := "_r" + hex.EncodeToString(sum[:8])
	base := table
	if len(base)+len(suffix) > warehouse.MaxIdentLen {
		base = base[:warehouse.MaxIdentLen-len(suffix)]
	}
	name := base + suffix
	if err := warehouse.ValidIdent(name); err != nil {
		return "", fmt.Errorf("partition of %s for run %s: %w", table, runID, err)
	}
	return name, nil
}

// tableKind returns the relkind of schema.table ("" when absent).
func (c *Core) tableKind(ctx context.Context, schema, table string) (string, error) {
	var kind string
	if _, err := c.QueryRow(ctx, c.Render("table_kind.sql", nil), []any{schema, table}, &kind); err != nil {
		return "", fmt.Errorf("look up the layout of table %s: %w", table, err)
	}
	return kind, nil
}

// partitions lists the partitions attached to schema.table.
func (c *Core) partitions(ctx context.Context, schema, table string) (map[string]bool, error) {
	parts := map[string]bool{}
	var name string
	err := c.Each(ctx, c.Render("partitions.sql", nil), []any{schema, table}, []any{&name}, func() error {
		parts[name] = true
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("list the partitions of %s: %w", table, err)
	}
	return parts, nil
}

// startPartitions attaches run runID's partitions to the partitioned run
// tables that exist, in StartRun's transaction (see the top of the file).
func (c *Core) startPartitions(ctx context.Context, o *warehouse.Objects, runID string) error {
	var tables []runTable
	for t := range partitionedTables(o) {
		kind, err := c.tableKind(ctx, o.C.Schema, t.Name)
		if err != nil {
			return err
		}
		if kind == "p" {
			tables = append(tables, runTable{name: t.Name, quoted: warehouse.QuoteQualified(o.C.Schema, t.Name), partitioned: true})
		}
	}
	return c.createPartitions(ctx, o, runID, tables)
}

// createPartitions creates and attaches run runID's partition of each
// partitioned table of tables that lacks one. In the publishing
// transaction (for tables it created) it runs before any of the run's
// rows are written (the warehouse-scale INSERTs write through the
// parent), and a rollback removes the partitions with the rows.
func (c *Core) createPartitions(ctx context.Context, o *warehouse.Objects, runID string, tables []runTable) error {
	for _, t := range tables {
		if !t.partitioned {
			continue
		}
		name, err := PartitionName(t.name, runID)
		if err != nil {
			return err
		}
		have, err := c.partitions(ctx, o.C.Schema, t.name)
		if err != nil {
			return err
		}
		if have[name] {
			continue
		}
		part := warehouse.QuoteQualified(o.C.Schema, name)
		for _, stmt := range []string{
			"CREATE TABLE " + part + " (LIKE " + t.quoted + " INCLUDING DEFAULTS INCLUDING COMMENTS)",
			"COMMENT ON TABLE " + part + " IS " + sqltext.Literal("The rows of run "+runID+" in "+t.name+"; dropped with the run by retention."),
			"ALTER TABLE " + t.quoted + " ATTACH PARTITION " + part + " FOR VALUES IN (" + sqltext.Literal(runID) + ")",
		} {
			if _, err := c.Exec(ctx, "create partition "+name+" of "+t.name+" for run "+runID, stmt); err != nil {
				return err
			}
		}
	}
	return nil
}

// retainPartitions drops the partitions of the expired runs ids, the
// empty ones of runs that never published, and any partition whose run
// the runs table no longer holds (left by a fallback), after taking ACCESS EXCLUSIVE on every partitioned run
// table at once under a savepoint. It reports whether it did; false (and
// no error) when the lock was not granted within partitionLockWait, the
// transaction then being as it was before the call, so that the caller
// deletes by rows instead.
func (c *Core) retainPartitions(ctx context.Context, o *warehouse.Objects, ids []any) (bool, error) {
	var parents []runTable
	for _, t := range c.runTables {
		if t.partitioned {
			parents = append(parents, t)
		}
	}
	if len(parents) == 0 {
		return true, nil
	}
	// Partitions to keep: those of the runs the runs table still holds
	// that may have rows (only a committed publish writes rows, and it
	// leaves its run succeeded or rejected; the run being published is
	// still running here), less the expired ones.
	expired := map[string]bool{}
	for _, id := range ids {
		expired[id.(string)] = true
	}
	var status string
	type target struct {
		parent runTable
		part   string
	}
	var drop []target
	keep := map[string]bool{}
	var id string
	if err := c.Each(ctx, "SELECT run_id, status FROM "+o.Runs, nil, []any{&id, &status}, func() error {
		rows := status == warehouse.StatusSucceeded || status == warehouse.StatusRejected || status == warehouse.StatusRunning
		if rows && !expired[id] {
			for _, t := range parents {
				name, err := PartitionName(t.name, id)
				if err != nil {
					return err
				}
				keep[name] = true
			}
		}
		return nil
	}); err != nil {
		return false, fmt.Errorf("retention: list the runs of %s: %w", o.C.Runs.Name, err)
	}
	for _, t := range parents {
		have, err := c.partitions(ctx, o.C.Schema, t.name)
		if err != nil {
			return false, fmt.Errorf("retention: %w", err)
		}
		for name := range have {
			if !keep[name] {
				drop = append(drop, target{t, name})
			}
		}
	}
	if len(drop) == 0 {
		return true, nil
	}
	if _, err := c.Exec(ctx, "retention: savepoint", "SAVEPOINT counterpart_retention"); err != nil {
		return false, err
	}
	var old string
	if _, err := c.QueryRow(ctx, "SELECT current_setting('lock_timeout')", nil, &old); err != nil {
		return false, fmt.Errorf("retention: read lock_timeout: %w", err)
	}
	lock := "LOCK TABLE "
	for i, t := range parents {
		if i > 0 {
			lock += ", "
		}
		lock += t.quoted
	}
	lock += " IN ACCESS EXCLUSIVE MODE"
	_, err := c.Exec(ctx, "retention: set lock_timeout", "SELECT set_config('lock_timeout', $1, true)", partitionLockWait)
	if err == nil {
		_, err = c.Exec(ctx, "retention: lock the run tables", lock)
	}
	if err != nil {
		if ctx.Err() != nil {
			return false, err
		}
		// Busy (a reader, or a deadlock the server broke on our side):
		// undo to the savepoint, which also restores lock_timeout.
		if _, rerr := c.Exec(ctx, "retention: roll back to the savepoint after "+OneLine(err), "ROLLBACK TO SAVEPOINT counterpart_retention"); rerr != nil {
			return false, rerr
		}
		return false, nil
	}
	if _, err := c.Exec(ctx, "retention: restore lock_timeout", "SELECT set_config('lock_timeout', $1, true)", old); err != nil {
		return false, err
	}
	for _, d := range drop {
		part := warehouse.QuoteQualified(o.C.Schema, d.part)
		if _, err := c.Exec(ctx, "retention: detach "+d.part+" from "+d.parent.name, "ALTER TABLE "+d.parent.quoted+" DETACH PARTITION "+part); err != nil {
			return false, err
		}
		if _, err := c.Exec(ctx, "retention: drop "+d.part, "DROP TABLE "+part); err != nil {
			return false, err
		}
	}
	_, err = c.Exec(ctx, "retention: release the savepoint", "RELEASE SAVEPOINT counterpart_retention")
	return err == nil, err
}
