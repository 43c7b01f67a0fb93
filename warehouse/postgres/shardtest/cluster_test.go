package shardtest

import (
	"fmt"
	"testing"

	"counterpart/warehouse/postgres/pgtest"
)

// TestClusterHoldsTheRows: the partitioned table of foreign partitions
// and the single-node table hold the same rows (count, ids, a sum of a
// covariate), every shard holds some of them, and reading the sharded
// table moves bytes through the proxies while reading the plain one
// moves none.
func TestClusterHoldsTheRows(t *testing.T) {
	c := New(t, 1000, 3)
	for i, n := range c.Rows {
		if n == 0 {
			t.Errorf("shard %d holds no rows", i)
		}
	}
	q := "SELECT count(*), CAST(sum(member_id) AS BIGINT), CAST(sum(age) AS BIGINT), count(DISTINCT %s) FROM %s"
	before := c.Counts()
	single := fmt.Sprint(pgtest.Query(t, c.DSN, fmt.Sprintf(q, PartitionColumn, Single)))
	if got := c.Counts().Sub(before); got.Total() != 0 {
		t.Errorf("reading the single-node table moved %v through the shard proxies", got)
	}
	sharded := fmt.Sprint(pgtest.Query(t, c.DSN, fmt.Sprintf(q, PartitionColumn, Sharded)))
	if single != sharded || single != fmt.Sprintf("[[1000 %d %d 2]]", sum(c.Data.MemberID), sum(c.Data.Age)) {
		t.Errorf("single-node %s, sharded %s", single, sharded)
	}
	for i, p := range c.Proxies {
		if p.Counts().FromShard == 0 {
			t.Errorf("proxy %d carried nothing from its shard", i)
		}
	}
}

func sum(v []int64) int64 {
	var s int64
	for _, a := range v {
		s += a
	}
	return s
}
