package study

import (
	"encoding/json"
	"fmt"
	"math"

	"counterpart/warehouse"
)

// The runs row stores a run's Summary as JSON (written by Publish), and its
// counts, gate and effects again in columns of their own. This file is the
// one reader of that format, so the command and the report never decode
// JSON the study wrote.

// DecodeSummary reads the Summary a run stored. Runs published before the
// summary column existed have none: that is bad input (the user can rerun
// the study), not a runtime failure.
func DecodeSummary(rec warehouse.RunRecord) (*Summary, error) {
	if rec.SummaryJSON == "" {
		return nil, fmt.Errorf("%w: run %s has no stored summary (status %s); rerun the study", warehouse.ErrBadInput, rec.RunID, rec.Status)
	}
	var sum Summary
	if err := json.Unmarshal([]byte(rec.SummaryJSON), &sum); err != nil {
		return nil, fmt.Errorf("decode summary of run %s: %w", rec.RunID, err)
	}
	return &sum, nil
}

// RunDigest is what a list of runs shows of one run. It is read from the
// row's own count, balance and effect columns rather than the Summary, so
// runs stored before the summary column still list.
type RunDigest struct {
	Units, Treated, MatchedTreated int
	// WorstSMD is the gate's largest |SMD|; NaN when the row holds no gate
	// (a run that failed before balance).
	WorstSMD float64
	// Headline is the first difference of the headline adjustment (or, for
	// a row whose Summary does not name it, of the first adjusted row);
	// nil when the row holds no effects.
	Headline *EffectRow
}

// Digest reads a runs row's digest. A column that is empty or does not
// decode leaves its fields at their zero (or NaN) values: a listing shows
// what it can of every run instead of failing on one.
func Digest(rec warehouse.RunRecord) RunDigest {
	d := RunDigest{WorstSMD: math.NaN()}
	var counts Counts
	if json.Unmarshal([]byte(rec.CountsJSON), &counts) == nil {
		d.Units, d.Treated, d.MatchedTreated = counts.Units, counts.Treated, counts.MatchedTreated
	}
	var bal struct {
		Gate Gate `json:"gate"`
	}
	if json.Unmarshal([]byte(rec.BalanceJSON), &bal) == nil {
		d.WorstSMD = math.Abs(float64(bal.Gate.WorstSMD))
	}
	var effects []EffectRow
	if json.Unmarshal([]byte(rec.EffectsJSON), &effects) == nil {
		var sum struct {
			Primary string `json:"headline_adjustment"`
		}
		_ = json.Unmarshal([]byte(rec.SummaryJSON), &sum)
		for _, e := range effects {
			if e.Contrast == "difference" && (e.Adjustment == sum.Primary || (sum.Primary == "" && e.Adjustment != "unadjusted")) {
				d.Headline = &e
				break
			}
		}
	}
	return d
}
