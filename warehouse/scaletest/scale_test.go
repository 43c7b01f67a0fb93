package scaletest

import (
	"context"
	"database/sql"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	_ "github.com/duckdb/duckdb-go/v2"
	"github.com/jackc/pgx/v5"

	"counterpart/match/score"
	"counterpart/match/study"
	"counterpart/match/weights"
	"counterpart/warehouse"
	"counterpart/warehouse/duckdb"
	"counterpart/warehouse/postgres"
	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/sqlcore"
)

// dataset is a scratch table: column names and SQL types, rows as text.
type dataset struct {
	name  string
	cols  []string
	types []string // SQL type per column, valid in both engines
	rows  [][]string
	q     warehouse.CohortQuery
	// ref, when set, is the statsmodels Logit fit in
	// testdata/score/statsmodels.json (written by make_reference.py).
	ref string
}

func readCSV(t *testing.T, file string) ([]string, [][]string) {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "..", "testdata", "score", file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	return recs[0], recs[1:]
}

// datasets: spector and fair are statsmodels' bundled data sets (via
// testdata/score); synthetic adds a text categorical covariate with a
// level ("B") that sorts before the lower-case ones bytewise, text unit
// ids and a boolean treatment.
func datasets(t *testing.T) []dataset {
	t.Helper()
	var out []dataset
	h, rows := readCSV(t, "spector.csv")
	ds := dataset{name: "spector", cols: append([]string{"id"}, lower(h)...),
		types: []string{"BIGINT", "DOUBLE PRECISION", "BIGINT", "BIGINT", "BIGINT"}, ref: "spector"}
	for i, r := range rows {
		ds.rows = append(ds.rows, append([]string{fmt.Sprint(i + 1)}, r...))
	}
	ds.q = warehouse.CohortQuery{SQL: "SELECT * FROM spector", Unit: "id", Treatment: "grade", Covariates: []string{"gpa", "tuce", "psi"}}
	out = append(out, ds)

	h, rows = readCSV(t, "fair.csv")
	ds = dataset{name: "fair", cols: append([]string{"id"}, h...),
		types: []string{"BIGINT", "BIGINT", "BIGINT", "DOUBLE PRECISION", "DOUBLE PRECISION", "DOUBLE PRECISION", "BIGINT"}, ref: "fair"}
	for i, r := range rows {
		ds.rows = append(ds.rows, append([]string{fmt.Sprint(i + 1)}, r...))
	}
	ds.q = warehouse.CohortQuery{SQL: "SELECT * FROM fair;", Unit: "id", Treatment: "affair",
		Covariates:  []string{"rate_marriage", "religious", "age", "yrs_married", "educ"},
		Categorical: []string{"rate_marriage", "religious"}}
	out = append(out, ds)

	rng := rand.New(rand.NewPCG(7, 11))
	ds = dataset{name: "synthetic", cols: []string{"uid", "x1", "x2", "grp", "treated"},
		types: []string{"VARCHAR", "DOUBLE PRECISION", "DOUBLE PRECISION", "VARCHAR", "BOOLEAN"}}
	levels := []string{"north", "B", "east", "south"}
	for i := range 3000 {
		x1 := rng.NormFloat64()*3 + 100
		x2 := rng.Float64()
		g := rng.IntN(4)
		eta := -0.5 + 0.4*(x1-100) - 1.2*x2 + []float64{0, 0.7, -0.4, 1.1}[g]
		z := rng.Float64() < 1/(1+math.Exp(-eta))
		ds.rows = append(ds.rows, []string{fmt.Sprintf("u%05d", 3000-i), fmt.Sprint(x1), fmt.Sprint(x2), levels[g], fmt.Sprint(z)})
	}
	ds.q = warehouse.CohortQuery{SQL: "SELECT * FROM synthetic WHERE x2 >= 0", Unit: "uid", Treatment: "treated", Covariates: []string{"x1", "grp", "x2"}}
	out = append(out, ds)
	return out
}

func lower(s []string) []string {
	out := make([]string, len(s))
	for i, x := range s {
		out[i] = strings.ToLower(x)
	}
	return out
}

func createSQL(d dataset) string {
	var cols []string
	for i, c := range d.cols {
		cols = append(cols, c+" "+d.types[i])
	}
	return "CREATE TABLE " + d.name + " (" + strings.Join(cols, ", ") + ")"
}

// engine opens one engine with the data sets loaded.
type engine struct {
	name string
	open func(t *testing.T) (warehouse.Warehouse, warehouse.InWarehouse)
	// query runs a read query on a separate connection.
	query func(t *testing.T, q string) [][]any
}

func duckEngine(t *testing.T, sets []dataset) engine {
	t.Helper()
	path := filepath.Join(t.TempDir(), "w.duckdb")
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range sets {
		if _, err := db.Exec(createSQL(d)); err != nil {
			t.Fatal(err)
		}
		tx, _ := db.Begin()
		ph := strings.TrimSuffix(strings.Repeat("?, ", len(d.cols)), ", ")
		st, err := tx.Prepare("INSERT INTO " + d.name + " VALUES (" + ph + ")")
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range d.rows {
			args := make([]any, len(r))
			for i, v := range r {
				args[i] = v
			}
			if _, err := st.Exec(args...); err != nil {
				t.Fatal(err)
			}
		}
		st.Close()
		if err := tx.Commit(); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := db.Exec("CREATE SCHEMA results"); err != nil {
		t.Fatal(err)
	}
	db.Close()
	var w *duckdb.Warehouse
	return engine{name: "duckdb",
		open: func(t *testing.T) (warehouse.Warehouse, warehouse.InWarehouse) {
			var err error
			w, err = duckdb.Open(context.Background(), path)
			if err != nil {
				t.Fatal(err)
			}
			t.Cleanup(func() { w.Close() })
			return w, w
		},
		query: func(t *testing.T, q string) [][]any {
			// The engine holds the file: query through a second connection
			// of the same process is not possible, so close and reopen.
			w.Close()
			db, err := sql.Open("duckdb", path)
			if err != nil {
				t.Fatal(err)
			}
			defer db.Close()
			rows, err := db.Query(q)
			if err != nil {
				t.Fatal(err)
			}
			defer rows.Close()
			cols, _ := rows.Columns()
			var out [][]any
			for rows.Next() {
				v := make([]any, len(cols))
				p := make([]any, len(cols))
				for i := range v {
					p[i] = &v[i]
				}
				if err := rows.Scan(p...); err != nil {
					t.Fatal(err)
				}
				out = append(out, v)
			}
			return out
		}}
}

func pgEngine(t *testing.T, sets []dataset) engine {
	t.Helper()
	dsn := pgtest.NewDatabase(t)
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, d := range sets {
		if _, err := conn.Exec(ctx, createSQL(d)); err != nil {
			t.Fatal(err)
		}
		ph := make([]string, len(d.cols))
		for i := range ph {
			ph[i] = fmt.Sprintf("CAST(CAST($%d AS text) AS %s)", i+1, d.types[i])
		}
		b := &pgx.Batch{}
		for _, r := range d.rows {
			args := make([]any, len(r))
			for i, v := range r {
				args[i] = v
			}
			b.Queue("INSERT INTO "+d.name+" VALUES ("+strings.Join(ph, ", ")+")", args...)
		}
		if err := conn.SendBatch(ctx, b).Close(); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := conn.Exec(ctx, "CREATE SCHEMA results"); err != nil {
		t.Fatal(err)
	}
	return engine{name: "postgres",
		open: func(t *testing.T) (warehouse.Warehouse, warehouse.InWarehouse) {
			w, err := postgres.Open(context.Background(), dsn)
			if err != nil {
				t.Fatal(err)
			}
			t.Cleanup(func() { w.Close() })
			return w, w
		},
		query: func(t *testing.T, q string) [][]any { return pgtest.Query(t, dsn, q) }}
}

// inMemory is the in-memory path: ReadCohort, the design of
// score.Design (numeric as is, categorical → indicators of every level
// but the first), FitModel.
func inMemory(t *testing.T, w warehouse.Warehouse, q warehouse.CohortQuery) (*warehouse.Cohort, *score.Fit) {
	t.Helper()
	c, err := w.ReadCohort(context.Background(), q)
	if err != nil {
		t.Fatal(err)
	}
	var x [][]float64
	var names []string
	for _, cv := range c.Covariates {
		if cv.Kind == warehouse.Numeric {
			x = append(x, cv.Values)
			names = append(names, cv.Name)
			continue
		}
		for l := 1; l < len(cv.Levels); l++ {
			col := make([]float64, c.N())
			for i, code := range cv.Codes {
				if int(code) == l {
					col[i] = 1
				}
			}
			x = append(x, col)
			names = append(names, cv.Name+"="+cv.Levels[l])
		}
	}
	fit, err := score.FitModel(x, names, c.Treated, score.Options{})
	if err != nil {
		t.Fatal(err)
	}
	return c, fit
}

func rel(got, want float64) float64 {
	if got == want {
		return 0
	}
	return math.Abs(got-want) / math.Max(math.Abs(want), 1e-300)
}

func unitKey(c *warehouse.Cohort, i int) string {
	if c.IDKind == warehouse.IDText {
		return c.TextIDs[i]
	}
	return fmt.Sprint(c.IntIDs[i])
}

// TestInWarehouseMatchesInMemory fits every data set in each engine and
// in memory: coefficients and SEs agree to 1e-8 relative (and, for the
// registry data, with statsmodels' Logit to 1e-6); scores and all five
// closed-form weights written by ScoreInto agree with match/weights on the
// in-memory scores to 1e-10; MatchInput's logits agree to 1e-10.
func TestInWarehouseMatchesInMemory(t *testing.T) {
	var sm map[string]struct {
		Names []string
		Coef  []float64
		SE    []float64
	}
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "score", "statsmodels.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &sm); err != nil {
		t.Fatal(err)
	}
	sets := datasets(t)
	for _, mk := range []func(*testing.T, []dataset) engine{duckEngine, pgEngine} {
		eng := mk(t, sets)
		for _, d := range sets {
			t.Run(eng.name+"/"+d.name, func(t *testing.T) {
				ctx := context.Background()
				w, iw := eng.open(t)
				c, want := inMemory(t, w, d.q)
				got, dsql, err := study.FitInWarehouse(ctx, iw, d.q, score.Options{})
				if err != nil {
					t.Fatal(err)
				}
				if !slices.Equal(got.Names, want.Names) {
					t.Fatalf("names %v, in memory %v", got.Names, want.Names)
				}
				for j, name := range want.Names {
					if e := rel(got.Coef[j], want.Coef[j]); e > 1e-8 {
						t.Errorf("coef %s: in warehouse %.15g, in memory %.15g (rel %.2g)", name, got.Coef[j], want.Coef[j], e)
					}
					if e := rel(got.SE[j], want.SE[j]); e > 1e-8 {
						t.Errorf("SE %s: in warehouse %.15g, in memory %.15g (rel %.2g)", name, got.SE[j], want.SE[j], e)
					}
				}
				if r, ok := sm[d.ref]; ok {
					for j := range r.Coef {
						if e := rel(got.Coef[j], r.Coef[j]); e > 1e-6 {
							t.Errorf("coef %s: %.10g, statsmodels %.10g", r.Names[j], got.Coef[j], r.Coef[j])
						}
						if e := rel(got.SE[j], r.SE[j]); e > 1e-6 {
							t.Errorf("SE %s: %.10g, statsmodels %.10g", r.Names[j], got.SE[j], r.SE[j])
						}
					}
				}

				// Scores and weights under the minmax support rule.
				sup, err := study.SupportInWarehouse(ctx, iw, d.q, dsql, got.Coef, "minmax")
				if err != nil {
					t.Fatal(err)
				}
				z := c.Treated
				lo := [2]float64{math.Inf(1), math.Inf(1)}
				hi := [2]float64{math.Inf(-1), math.Inf(-1)}
				for i, p := range want.PS {
					a := 0
					if z[i] {
						a = 1
					}
					lo[a], hi[a] = math.Min(lo[a], p), math.Max(hi[a], p)
				}
				low, high := math.Max(lo[0], lo[1]), math.Min(hi[0], hi[1])
				schemes := weights.Names()
				out := warehouse.Output{Schema: "results", Prefix: d.name + "_", Study: d.name, Unit: c.Unit, IDKind: c.IDKind,
					Treatment: c.Treatment, Schemes: schemes}
				for _, cv := range c.Covariates {
					out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: cv.Name, Kind: cv.Kind})
				}
				if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1", Study: d.name, Status: warehouse.StatusRunning,
					StartedAt: time.Now(), Engine: w.Engine()}); err != nil {
					t.Fatal(err)
				}
				if err := w.(interface{ SQLCore() *sqlcore.Core }).SQLCore().CreateObjects(ctx, out); err != nil {
					t.Fatal(err)
				}
				if err := iw.ScoreInto(ctx, out, "r1", d.q, dsql, got.Coef, sup, schemes); err != nil {
					t.Fatal(err)
				}
				mi, err := iw.MatchInput(ctx, d.q, dsql, got.Coef, sup, nil)
				if err != nil {
					t.Fatal(err)
				}
				idx := map[string]int{}
				for i := range z {
					idx[unitKey(c, i)] = i
				}
				if len(mi.Logit) != len(z) || mi.Strata != 1 {
					t.Fatalf("match input: %d rows, %d strata", len(mi.Logit), mi.Strata)
				}
				for r := range mi.Logit {
					key := ""
					if mi.IDKind == warehouse.IDText {
						key = mi.TextIDs[r]
					} else {
						key = fmt.Sprint(mi.IntIDs[r])
					}
					i := idx[key]
					if e := math.Abs(mi.Logit[r] - want.Logit[i]); e > 1e-10*(1+math.Abs(want.Logit[i])) || mi.Treated[r] != z[i] {
						t.Fatalf("match input unit %s: logit %.15g, in memory %.15g", key, mi.Logit[r], want.Logit[i])
					}
				}

				wants := make([][]float64, len(schemes))
				for s, name := range schemes {
					fn, _ := weights.ByName(name)
					wants[s] = fn(want.PS, z)
				}
				cols := "ps, logit_ps, in_support, " + strings.Join(schemes, ", ")
				rows := eng.query(t, fmt.Sprintf("SELECT CAST(s.%s AS VARCHAR), %s FROM results.%s_scores s JOIN results.%s_weights w USING (run_id, %s) WHERE run_id = 'r1'",
					c.Unit, cols, d.name, d.name, c.Unit))
				if len(rows) != len(z) {
					t.Fatalf("%d score rows for %d units", len(rows), len(z))
				}
				for _, r := range rows {
					i := idx[r[0].(string)]
					ps, in := r[1].(float64), r[3].(bool)
					wantIn := want.PS[i] >= low && want.PS[i] <= high
					if e := rel(ps, want.PS[i]); e > 1e-10 || in != wantIn {
						t.Fatalf("unit %v: ps %.15g in %v, in memory %.15g in %v", r[0], ps, in, want.PS[i], wantIn)
					}
					for s, name := range schemes {
						wv := wants[s][i]
						if !wantIn {
							wv = 0
						}
						if e := math.Abs(r[4+s].(float64) - wv); e > 1e-10*math.Max(1, math.Abs(wv)) {
							t.Fatalf("unit %v: %s weight %.15g, in memory %.15g", r[0], name, r[4+s], wv)
						}
					}
				}
			})
		}
	}
}
