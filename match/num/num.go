// Package num holds the one number type the run summary and its parts
// share: a float64 that survives JSON with NaN and ±Inf (no estimate,
// an empty arm) instead of failing the whole summary.
package num

import (
	"encoding/json"
	"math"
	"strconv"
)

// Num is a float64 that encodes NaN and ±Inf as JSON null.
type Num float64

// MarshalJSON implements json.Marshaler.
func (n Num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// UnmarshalJSON implements json.Unmarshaler (null becomes NaN).
func (n *Num) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*n = Num(math.NaN())
		return nil
	}
	var f float64
	if err := json.Unmarshal(b, &f); err != nil {
		return err
	}
	*n = Num(f)
	return nil
}
