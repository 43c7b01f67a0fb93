package assign
import "testing"
func TestDbg(t *testing.T) {
	for _, c := range []struct{s uint64; nt, nc int; r uint64}{{14,2000,2000,1000000},{16,1900,2000,7}} {
		score, treated := lcgInstance(c.s, c.nt, c.nc, c.r)
		_, cert, _ := Optimal(score, treated, nil, nil, Options{Controls: 1})
		t.Logf("%+v", cert)
	}
}
