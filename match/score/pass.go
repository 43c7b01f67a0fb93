package score

import (
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// Rows per chunk and per block. A chunk is copied into a k×chunkRows
// row-major buffer (k = columns + 1; 26×1024×8 bytes ≈ 210 kB, about an
// L2 cache) on which the BLAS calls run. A block is the unit of work handed
// to a goroutine and of the fixed-order reduction: its size does not depend
// on the number of cores, so neither do the results.
const (
	chunkRows = 1024
	blockRows = 32 * chunkRows
)

// design is the standardised design matrix, held as views on the caller's
// columns: x̃_ij = (x_ij − center_j)·invScale_j, plus the intercept
// column x̃_i0 = 1 which is never stored.
type design struct {
	cols     [][]float64
	names    []string
	center   []float64
	invScale []float64
	z        []bool
	n, k     int // units; coefficients including the intercept
	// check, when set, is Options.Check: asked between chunks, so that
	// a wide design's pass (seconds each) still stops promptly.
	check func() error
}

// moments holds what one pass over the data returns at a coefficient
// vector β̃ (standardised scale).
type moments struct {
	// info is the upper triangle of X̃'WX̃ (k×k, row-major) with
	// w_i = e_i(1 − e_i): the observed (= expected, for the canonical
	// logit link) information.
	info []float64
	// grad is the score X̃'(z − e).
	grad []float64
	// logLik is Σ_i z_i η_i − log(1 + exp(η_i)).
	logLik float64
}

func newMoments(k int) moments {
	return moments{info: make([]float64, k*k), grad: make([]float64, k)}
}

func (m *moments) add(o *moments) {
	for i, v := range o.info {
		m.info[i] += v
	}
	for i, v := range o.grad {
		m.grad[i] += v
	}
	m.logLik += o.logLik
}

// workspace is one goroutine's scratch space.
type workspace struct {
	buf []float64 // k × chunkRows
	res []float64 // z − e per row of the chunk
	sw  []float64 // √w per row of the chunk
}

// chunkFlops bounds the information update of one chunk, k²·rows
// multiply-adds, to about a tenth of a second on one core. Designs up to
// k = 362 keep chunkRows rows; a wider one gets shorter chunks, so that a
// cancellation check between chunks is never far away. The chunk length
// depends only on k, so results still do not depend on the machine.
const chunkFlops = 1 << 27

// chunkLen is the rows per chunk for a design of k coefficients: a power
// of two, so blocks split evenly.
func chunkLen(k int) int {
	m := chunkRows
	for m > 8 && k*k*m > chunkFlops {
		m /= 2
	}
	return m
}

// pass evaluates the linear predictor η = X̃β̃ into eta (len n), and
// returns the log-likelihood, score and information at β̃. Work is split
// into blocks of blockRows units processed by up to GOMAXPROCS goroutines;
// block partials are summed in block order so the result is deterministic.
// The error is d.check's, when it stops the pass.
func (d *design) pass(beta, eta []float64) (moments, error) {
	nb := (d.n + blockRows - 1) / blockRows
	parts := make([]moments, nb)
	workers := min(runtime.GOMAXPROCS(0), nb)
	rows := chunkLen(d.k)
	var next atomic.Int64
	var stop atomic.Pointer[error]
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ws := workspace{
				buf: make([]float64, d.k*rows),
				res: make([]float64, rows),
				sw:  make([]float64, rows),
			}
			for {
				b := int(next.Add(1) - 1)
				if b >= nb {
					return
				}
				parts[b] = newMoments(d.k)
				lo := b * blockRows
				hi := min(lo+blockRows, d.n)
				for s := lo; s < hi; s += rows {
					if stop.Load() != nil {
						return
					}
					if d.check != nil {
						if err := d.check(); err != nil {
							stop.CompareAndSwap(nil, &err)
							return
						}
					}
					d.chunk(s, min(s+rows, hi), beta, eta, &ws, &parts[b])
				}
			}
		}()
	}
	wg.Wait()
	if err := stop.Load(); err != nil {
		return moments{}, *err
	}
	total := newMoments(d.k)
	for b := range parts {
		total.add(&parts[b])
	}
	return total, nil
}

// chunk accumulates rows lo..hi−1 into acc.
func (d *design) chunk(lo, hi int, beta, eta []float64, ws *workspace, acc *moments) {
	m := hi - lo
	k := d.k
	buf := ws.buf[:k*m]
	// Row 0 of the buffer is the intercept, row j+1 is standardised column j.
	row := buf[:m]
	for i := range row {
		row[i] = 1
	}
	for j, col := range d.cols {
		c, s := d.center[j], d.invScale[j]
		row = buf[(j+1)*m : (j+2)*m]
		for i, v := range col[lo:hi] {
			row[i] = (v - c) * s
		}
	}
	a := blas64.General{Rows: k, Cols: m, Stride: m, Data: buf}

	// η = X̃β̃, written straight into the caller's slice.
	et := eta[lo:hi]
	blas64.Gemv(blas.Trans, 1, a, blas64.Vector{N: k, Data: beta, Inc: 1}, 0, blas64.Vector{N: m, Data: et, Inc: 1})

	// With t = exp(−|η|), every quantity is formed without cancellation:
	// log(1 + e^η) = max(η, 0) + log1p(t), e = 1/(1+t) or t/(1+t), and
	// 1 − e the other one; w = e(1 − e) = t/(1+t)².
	res, sw := ws.res[:m], ws.sw[:m]
	z := d.z[lo:hi]
	var ll float64
	for i, h := range et {
		t := math.Exp(-math.Abs(h))
		l1p := math.Log1p(t)
		inv := 1 / (1 + t)
		var p, q float64 // e and 1 − e
		if h >= 0 {
			p, q = inv, t*inv
			l1p += h
		} else {
			p, q = t*inv, inv
		}
		if z[i] {
			ll += h - l1p
			res[i] = q
		} else {
			ll -= l1p
			res[i] = -p
		}
		sw[i] = math.Sqrt(p * q)
	}
	acc.logLik += ll

	// Score: X̃'(z − e).
	blas64.Gemv(blas.NoTrans, 1, a, blas64.Vector{N: m, Data: res, Inc: 1}, 1, blas64.Vector{N: k, Data: acc.grad, Inc: 1})

	// Information: scale each row of the buffer by √w, then X̃'WX̃ += AA'.
	for j := range k {
		row := buf[j*m : (j+1)*m]
		for i, s := range sw {
			row[i] *= s
		}
	}
	blas64.Syrk(blas.NoTrans, 1, a, 1, blas64.Symmetric{Uplo: blas.Upper, N: k, Stride: k, Data: acc.info})
}
