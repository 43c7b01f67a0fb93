package survival

import (
	"encoding/csv"
	"fmt"
	"maps"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"testing"
)

// refDir holds the reference values written by make_reference.R (R's
// survival package) and make_reference.py (statsmodels).
const refDir = "../../testdata/survival"

// refTol is the agreement required with the reference libraries: relative
// 1e-6, with an absolute floor scaled to the quantity's SE where a value
// sits near 0.
const refTol = 1e-6

// readCSV returns the header-keyed columns of a CSV file.
func readCSV(t *testing.T, name string) map[string][]string {
	t.Helper()
	f, err := os.Open(filepath.Join(refDir, name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("read %s: %v", name, err)
	}
	cols := map[string][]string{}
	for _, r := range rows[1:] {
		for j, h := range rows[0] {
			cols[h] = append(cols[h], r[j])
		}
	}
	return cols
}

func floats(t *testing.T, s []string) []float64 {
	t.Helper()
	out := make([]float64, len(s))
	for i, v := range s {
		if v == "NA" || v == "NaN" {
			out[i] = math.NaN()
			continue
		}
		f, err := strconv.ParseFloat(v, 64)
		if err != nil {
			t.Fatalf("parse %q: %v", v, err)
		}
		out[i] = f
	}
	return out
}

// readRef returns the key,value reference file as a map.
func readRef(t *testing.T, name string) map[string]float64 {
	t.Helper()
	c := readCSV(t, name)
	v := floats(t, c["value"])
	m := map[string]float64{}
	for i, k := range c["key"] {
		m[k] = v[i]
	}
	return m
}

// loadSurv reads a dataset written by make_reference.R.
func loadSurv(t *testing.T, name string) Data {
	t.Helper()
	c := readCSV(t, name+"_data.csv")
	tm, e, z, w, cl := floats(t, c["t"]), floats(t, c["e"]), floats(t, c["z"]), floats(t, c["w"]), floats(t, c["cl"])
	d := Data{Time: tm, Weight: w, Event: make([]bool, len(tm)), Treated: make([]bool, len(tm)), Cluster: make([]int, len(tm))}
	for i := range tm {
		d.Event[i], d.Treated[i], d.Cluster[i] = e[i] == 1, z[i] == 1, int(cl[i])
	}
	return d
}

// relDiff is |got − want| / max(|want|, floor).
func relDiff(got, want, floor float64) float64 {
	return math.Abs(got-want) / math.Max(math.Abs(want), floor)
}

// tracker records the largest relative difference per check family, so the
// test log reports measured agreement, not just pass/fail.
type tracker map[string]float64

func (tr tracker) check(t *testing.T, family, what string, got, want, floor float64) {
	t.Helper()
	if math.IsNaN(want) {
		return
	}
	r := relDiff(got, want, floor)
	if math.IsNaN(r) || r > refTol {
		t.Errorf("%s %s: got %.12g, reference %.12g (rel %.2g)", family, what, got, want, r)
	}
	if r > tr[family] || math.IsNaN(r) {
		tr[family] = r
	}
}

func (tr tracker) log(t *testing.T) {
	keys := slices.Sorted(maps.Keys(tr))
	for _, k := range keys {
		t.Logf("max relative difference %-30s %.3g", k, tr[k])
	}
}

var survSets = []struct {
	name     string
	horizons []float64
}{
	{"veteran", []float64{30, 90, 180, 365}},
	{"lung", []float64{180, 365, 730}},
	{"colon", []float64{365, 1826}},
}

// Source: R survival 3.5.3, survfit(Surv(t, e) ~ z, weights = w,
// robust = FALSE) for the table and Greenwood SEs; summary(fit, rmean = H)
// for RMST and se(rmean); survfit(..., robust = TRUE[, cluster = cl],
// influence = TRUE) for the infinitesimal-jackknife SEs, and contrasts
// assembled in make_reference.R from R's own influence matrices.
func TestKaplanMeierMatchesR(t *testing.T) {
	tr := tracker{}
	for _, ds := range survSets {
		t.Run(ds.name, func(t *testing.T) {
			d := loadSurv(t, ds.name)
			ref := readRef(t, ds.name+"_ref.csv")
			km := readCSV(t, ds.name+"_km.csv")
			arm, tm := floats(t, km["arm"]), floats(t, km["time"])
			nr, ne, nc := floats(t, km["n_risk"]), floats(t, km["n_event"]), floats(t, km["n_censor"])
			sv, se := floats(t, km["surv"]), floats(t, km["se_surv"])
			seRob := map[string][]float64{"row": floats(t, km["se_row"]), "cluster": floats(t, km["se_cluster"])}
			for _, variant := range []string{"row", "cluster"} {
				dd := d
				if variant == "row" {
					dd.Cluster = nil
				}
				res, err := KaplanMeier(dd, ds.horizons)
				if err != nil {
					t.Fatal(err)
				}
				{
					var j [2]int
					for i := range tm {
						a := int(arm[i])
						st := res.Curves[a].Steps[j[a]]
						j[a]++
						w := fmt.Sprintf("arm %d t=%v", a, tm[i])
						tr.check(t, "km table", w+" time", st.Time, tm[i], 1)
						tr.check(t, "km table", w+" n.risk", st.AtRisk, nr[i], 1)
						tr.check(t, "km table", w+" n.event", st.Events, ne[i], 1)
						tr.check(t, "km table", w+" n.censor", st.Censored, nc[i], 1)
						tr.check(t, "km table", w+" surv", st.Surv, sv[i], 1e-3)
						tr.check(t, "km greenwood se", w, st.SE, se[i], 1e-3)
						tr.check(t, "km robust se per step", w+" "+variant, st.RobustSE, seRob[variant][i], 1e-3)
					}
					for a := range j {
						if j[a] != len(res.Curves[a].Steps) {
							t.Errorf("arm %d: %d steps, R has %d", a, len(res.Curves[a].Steps), j[a])
						}
					}
				}
				for _, h := range res.Horizons {
					for a := 0; a < 2; a++ {
						p := fmt.Sprintf("km/arm%d/h%g/", a, h.Time)
						tr.check(t, "km horizon surv", p, h.Surv[a].Value, ref[p+"surv"], 1e-3)
						tr.check(t, "km horizon se greenwood", p, h.Surv[a].Greenwood.SE, ref[p+"se_greenwood"], 1e-3)
						tr.check(t, "km horizon se robust", p+variant, h.Surv[a].Robust.SE, ref[p+"se_"+variant], 1e-3)
						q := fmt.Sprintf("rmst/arm%d/h%g/", a, h.Time)
						tr.check(t, "rmst", q, h.RMST[a].Value, ref[q+"est"], 1)
						tr.check(t, "rmst se greenwood", q, h.RMST[a].Greenwood.SE, ref[q+"se_greenwood"], 1e-3)
					}
					c := fmt.Sprintf("contrast/%s/h%g/", variant, h.Time)
					tr.check(t, "rmst se robust", c+"1", h.RMST[1].Robust.SE, ref[c+"se_rmst1"], 1e-3)
					tr.check(t, "rmst se robust", c+"0", h.RMST[0].Robust.SE, ref[c+"se_rmst0"], 1e-3)
					tr.check(t, "contrast se robust", c+"surv diff", h.SurvDiff.Robust.SE, ref[c+"se_surv_diff"], 1e-3)
					tr.check(t, "contrast se robust", c+"log rr", h.RiskRatio.Robust.SE, ref[c+"se_log_rr"], 1e-3)
					tr.check(t, "contrast se robust", c+"rmst diff", h.RMSTDiff.Robust.SE, ref[c+"se_rmst_diff"], 1e-3)
				}
			}
		})
	}
	tr.log(t)
}

// Source: R survival 3.5.3, coxph(Surv(t, e) ~ z, weights = w,
// robust = TRUE, ties = ties) (coef, sqrt(naive.var), sqrt(var), loglik),
// coxph(..., cluster = cl) for the cluster SE, and cox.zph(fit,
// transform = "km") for the PH check.
func TestCoxMatchesR(t *testing.T) {
	tr := tracker{}
	for _, ds := range survSets {
		d := loadSurv(t, ds.name)
		ref := readRef(t, ds.name+"_ref.csv")
		for _, ties := range []Ties{Efron, Breslow} {
			t.Run(ds.name+"/"+ties.String(), func(t *testing.T) {
				f, err := Cox(d, ties)
				if err != nil {
					t.Fatal(err)
				}
				p := "cox/" + ties.String() + "/"
				se := ref[p+"se_model"]
				// The coefficient can sit near 0 (veteran's weighted HR is
				// ≈ 1), so its floor is its SE: agreement to 1e-6 SE.
				tr.check(t, "cox coef", p, f.LogHR, ref[p+"coef"], se)
				tr.check(t, "cox se model", p, f.Model.SE, se, 0)
				tr.check(t, "cox se robust", p, f.Robust.SE, ref[p+"se_robust"], 0)
				tr.check(t, "cox se cluster", p, f.Cluster.SE, ref[p+"se_cluster"], 0)
				tr.check(t, "cox loglik", p, f.LogLik, ref[p+"loglik"], 0)
				tr.check(t, "cox loglik", p+"0", f.LogLik0, ref[p+"loglik0"], 0)
				tr.check(t, "zph chisq", p, f.PH.ChiSq, ref[p+"zph_chisq"], 0)
				tr.check(t, "zph p", p, f.PH.P, ref[p+"zph_p"], 0)
			})
		}
	}
	tr.log(t)
}

// Source: statsmodels 0.13.5 (Debian python3-statsmodels),
// make_reference.py: GLM(Poisson, offset = log E, var_weights = w) with
// cov_type "HC0" and "cluster"; WLS(y/E ~ z, weights = w·E) for the rate
// difference. Data: R survival::cgd (infections per day, rIFN-g vs
// placebo, clusters = centre) and MASS::Insurance (claims per holder).
func TestRatesMatchStatsmodels(t *testing.T) {
	tr := tracker{}
	for _, name := range []string{"cgd", "insurance"} {
		t.Run(name, func(t *testing.T) {
			c := readCSV(t, "rates_"+name+".csv")
			ref := readRef(t, "rates_"+name+"_ref.csv")
			cl := floats(t, c["cl"])
			d := RateData{Count: floats(t, c["count"]), Exposure: floats(t, c["exposure"]),
				Weight: floats(t, c["w"]), Treated: make([]bool, len(cl)), Cluster: make([]int, len(cl))}
			for i, z := range floats(t, c["z"]) {
				d.Treated[i], d.Cluster[i] = z == 1, int(cl[i])
			}
			f, err := Rates(d, 1000)
			if err != nil {
				t.Fatal(err)
			}
			tr.check(t, "rate log rr", name, math.Log(f.RateRatio), ref["glm_var/log_rr"], 0)
			tr.check(t, "rate log rr", name+" rate0", math.Log(f.Rate[0]), ref["glm_var/log_rate0"], 0)
			tr.check(t, "rate se hc0", name, f.HC0.SE, ref["glm_var/se_hc0"], 0)
			tr.check(t, "rate se cluster", name, f.Cluster.SE, ref["glm_var/se_cluster"], 0)
			tr.check(t, "rate diff", name, f.Diff, 1000*ref["wls/rate_diff"], 0)
			tr.check(t, "rate diff se hc0", name, f.DiffHC0.SE, 1000*ref["wls/se_hc0"], 0)
			tr.check(t, "rate diff se cluster", name, f.DiffCluster.SE, 1000*ref["wls/se_cluster"], 0)
			// Source: R glm(quasipoisson, weights = w) + sandwich vcovHC
			// "HC0" / vcovCL "HC1" (make_reference.R).
			rr := readRef(t, "rates_"+name+"_r.csv")
			tr.check(t, "rate log rr (R)", name, math.Log(f.RateRatio), rr["log_rr"], 0)
			tr.check(t, "rate se hc0 (R sandwich)", name, f.HC0.SE, rr["se_hc0"], 0)
			tr.check(t, "rate se cluster (R sandwich)", name, f.Cluster.SE, rr["se_cluster"], 0)
			if f.Groups != int(ref["n_groups"]) {
				t.Errorf("groups %d, statsmodels %v", f.Groups, ref["n_groups"])
			}
		})
	}
	tr.log(t)
}

// Source: statsmodels 0.13.5 PHReg (make_reference.py), unweighted because
// PHReg takes no weights: coefficient, model-based SE (bse of fit()) and
// robust SE by cluster (fit(groups = cl)). PHReg's cluster SE under Efron
// ties differs from R's coxph by 0.02–0.5% on these data, so for Efron the
// unweighted cluster SE is compared with R coxph(..., cluster = cl)
// (make_reference.R) instead.
func TestCoxMatchesPHReg(t *testing.T) {
	tr := tracker{}
	for _, ds := range survSets {
		d := loadSurv(t, ds.name)
		d.Weight = nil
		ref := readRef(t, ds.name+"_phreg.csv")
		for _, ties := range []Ties{Efron, Breslow} {
			f, err := Cox(d, ties)
			if err != nil {
				t.Fatal(err)
			}
			p := "phreg_" + ties.String() + "/"
			w := ds.name + " " + ties.String()
			tr.check(t, "phreg coef", w, f.LogHR, ref[p+"coef"], ref[p+"se_model"])
			tr.check(t, "phreg se model", w, f.Model.SE, ref[p+"se_model"], 0)
			if ties == Breslow {
				tr.check(t, "phreg se cluster (breslow)", w, f.Cluster.SE, ref[p+"se_cluster"], 0)
			} else {
				rr := readRef(t, ds.name+"_ref.csv")
				tr.check(t, "R coxph unweighted coef", w, f.LogHR, rr["cox/efron_unweighted/coef"], f.Model.SE)
				tr.check(t, "R coxph unweighted se cluster", w, f.Cluster.SE, rr["cox/efron_unweighted/se_cluster"], 0)
			}
		}
	}
	tr.log(t)
}
