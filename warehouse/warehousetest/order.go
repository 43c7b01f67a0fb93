package warehousetest

import (
	"fmt"
	"math"
	"net/url"
	"slices"
	"strconv"
	"strings"
)

// The helpers below serve the row-order tests (issue #16): the same cohort
// stored in several physical row orders must give byte-identical results.
// "Byte-identical" is judged on canonical cell text in which a float64 is
// its IEEE-754 bit pattern, so 0.1+0.2 and 0.3 differ and -0 differs from
// +0; comparing bits rather than within a tolerance is the point of the
// tests (common practice for reproducibility checks: compare outputs
// exactly, not approximately).

// ShuffledCopySQL returns one statement that creates table dst as a copy
// of src whose rows are stored in the order of md5(key || seed): a
// deterministic permutation per seed that has nothing to do with the key's
// own order. It is standard enough SQL for DuckDB and Postgres, whose
// CREATE TABLE … AS … ORDER BY stores rows in the query's order (DuckDB
// preserves insertion order by default; a Postgres heap is filled in the
// order rows arrive), so a plain scan then returns them in that order.
func ShuffledCopySQL(dst, src, key, seed string) string {
	return fmt.Sprintf("CREATE TABLE %s AS SELECT * FROM %s ORDER BY md5(CAST(%s AS VARCHAR) || '%s')", dst, src, key, seed)
}

// ParallelSettings force a parallel plan on Postgres even for a small
// table (PostgreSQL documentation, "Parallel Query" §15.1–15.4 and
// "Planner Cost Constants"): no setup or per-tuple cost for parallelism, no
// minimum table size, two workers per Gather, and the leader not reading
// rows itself, so that the rows arrive interleaved from the workers in an
// order that may change from one execution to the next.
var ParallelSettings = []string{
	"parallel_setup_cost=0",
	"parallel_tuple_cost=0",
	"min_parallel_table_scan_size=0",
	"min_parallel_index_scan_size=0",
	"max_parallel_workers_per_gather=2",
	"parallel_leader_participation=off",
}

// ParallelDSN returns the Postgres URL dsn with its options parameter set
// to ParallelSettings, so that every session the tool opens with it plans
// with parallel scans forced on (libpq's options connection parameter,
// which pgx sends in the startup message). Only URL-form DSNs are
// supported; a key=value DSN is returned with an options key appended.
func ParallelDSN(dsn string) string {
	opts := "-c " + strings.Join(ParallelSettings, " -c ")
	u, err := url.Parse(dsn)
	if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") {
		return dsn + " options='" + opts + "'"
	}
	q := u.Query()
	q.Set("options", opts)
	// Spaces as %20, not +: pgx unescapes the query as a path, so a + would
	// stay a plus sign (a literal + is already %2B).
	u.RawQuery = strings.ReplaceAll(q.Encode(), "+", "%20")
	return u.String()
}

// Canon renders one query value as canonical text: float64 (and float32)
// as their IEEE-754 bits in hex, integers in decimal, NULL as NULL, booleans
// and text as printed. Two results are byte-identical when their canonical
// rows are equal.
func Canon(v any) string {
	switch x := v.(type) {
	case nil:
		return "NULL"
	case float64:
		return "f" + strconv.FormatUint(math.Float64bits(x), 16)
	case float32:
		return "f" + strconv.FormatUint(math.Float64bits(float64(x)), 16)
	case int64:
		return strconv.FormatInt(x, 10)
	case int32:
		return strconv.FormatInt(int64(x), 10)
	case int16:
		return strconv.FormatInt(int64(x), 10)
	case int:
		return strconv.Itoa(x)
	case []byte:
		return string(x)
	}
	return fmt.Sprint(v)
}

// CanonRows renders every row of rows with Canon, cells joined by a tab.
func CanonRows(rows [][]any) []string {
	out := make([]string, len(rows))
	for i, r := range rows {
		cells := make([]string, len(r))
		for j, v := range r {
			cells[j] = Canon(v)
		}
		out[i] = strings.Join(cells, "\t")
	}
	return out
}

// RowDiff counts the rows of a that b lacks and the rows of b that a
// lacks, as multisets of canonical rows: 0, 0 means the same rows.
func RowDiff(a, b [][]any) (onlyA, onlyB int) {
	count := map[string]int{}
	for _, r := range CanonRows(a) {
		count[r]++
	}
	for _, r := range CanonRows(b) {
		count[r]--
	}
	for _, n := range count {
		if n > 0 {
			onlyA += n
		} else {
			onlyB -= n
		}
	}
	return onlyA, onlyB
}

// OnlyIn returns up to limit canonical rows of a that b lacks (as
// multisets), in a's order, each cut to its first keyCols cells: the keys
// of differing aggregate rows (effects: outcome, adjustment, …) for a
// message. Never use it on per-unit tables.
func OnlyIn(a, b [][]any, keyCols, limit int) []string {
	count := map[string]int{}
	for _, r := range CanonRows(b) {
		count[r]++
	}
	var out []string
	for i, r := range CanonRows(a) {
		if count[r] > 0 {
			count[r]--
			continue
		}
		if len(out) < limit {
			cells := CanonRows([][]any{a[i][:min(keyCols, len(a[i]))]})
			out = append(out, strings.ReplaceAll(cells[0], "\t", "/"))
		}
	}
	return out
}

// ControlSets maps each treated unit of matches rows (set_id, unit,
// treated, …: the first three columns of the matches table in contract
// order after run_id) to the sorted canonical ids of the controls of its
// set(s). A treated unit left unmatched has no entry.
func ControlSets(matches [][]any) map[string]string {
	treatedOf := map[string][]string{} // set_id → treated units
	controlsOf := map[string][]string{}
	for _, r := range matches {
		set, unit := Canon(r[0]), Canon(r[1])
		if r[2] == true {
			treatedOf[set] = append(treatedOf[set], unit)
		} else {
			controlsOf[set] = append(controlsOf[set], unit)
		}
	}
	out := map[string]string{}
	for set, ts := range treatedOf {
		cs := slices.Clone(controlsOf[set])
		slices.Sort(cs)
		for _, t := range ts {
			if prev, ok := out[t]; ok {
				cs = append(cs, strings.Split(prev, ",")...)
				slices.Sort(cs)
			}
			out[t] = strings.Join(cs, ",")
		}
	}
	return out
}

// PairsChanged counts the treated units whose control set differs between
// two runs' matches rows (matched in one run only counts as changed) and
// returns up to three of their ids, smallest first, for a message.
func PairsChanged(a, b [][]any) (changed int, examples []string) {
	sa, sb := ControlSets(a), ControlSets(b)
	var ids []string
	for t, cs := range sa {
		if sb[t] != cs {
			ids = append(ids, t)
		}
	}
	for t := range sb {
		if _, ok := sa[t]; !ok {
			ids = append(ids, t)
		}
	}
	slices.SortFunc(ids, func(x, y string) int {
		if len(x) != len(y) {
			return len(x) - len(y)
		}
		return strings.Compare(x, y)
	})
	return len(ids), ids[:min(3, len(ids))]
}
