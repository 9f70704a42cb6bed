package probe

import (
	"fmt"
	"math"
)

// Det (opset 11): for X of shape [*, M, M], Y[*] = det X[*, :, :].
// Each matrix is factored P·A = L·U by Gaussian elimination with partial
// pivoting (the largest |a_ik| of the column becomes the pivot), so
// det A = (−1)^swaps · Π_k u_kk. Elimination runs in float64 for both
// float32 and float64 inputs; an empty matrix (M = 0) has determinant 1.

func init() {
	reg("Det", detKernel, 11)
}

func detKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	if r < 2 {
		return fmt.Errorf("input must have rank >= 2 [*, M, M], got shape %v", x.Shape)
	}
	m := x.Shape[r-1]
	if x.Shape[r-2] != m {
		return fmt.Errorf("input must hold square matrices [*, M, M], got shape %v (%d×%d)", x.Shape, x.Shape[r-2], m)
	}
	out, err := shapeNew(c.Arena(), x.DType, x.Shape[:r-2])
	if err != nil {
		return err
	}
	switch xd := x.Data.(type) {
	case []float32:
		detRun(out.Data.([]float32), xd, m)
	case []float64:
		detRun(out.Data.([]float64), xd, m)
	default:
		return fmt.Errorf("input must be float32 or float64, got %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

// detRun writes the determinant of each m×m matrix of x to y.
func detRun[T Float](y, x []T, m int) {
	a := make([]float64, m*m)
	for b := range y {
		src := x[b*m*m : (b+1)*m*m]
		for i, v := range src {
			a[i] = float64(v)
		}
		y[b] = T(detLU(a, m))
	}
}

// detLU returns the determinant of the m×m row-major matrix a, destroying a.
func detLU(a []float64, m int) float64 {
	det := 1.0
	for k := 0; k < m; k++ {
		p, best := k, -1.0
		for i := k; i < m; i++ {
			v := math.Abs(a[i*m+k])
			if math.IsNaN(v) {
				return math.NaN() // keep NaN visible rather than pivoting around it
			}
			if v > best {
				p, best = i, v
			}
		}
		if best == 0 {
			return 0 // singular: the column has no pivot
		}
		if p != k {
			rk, rp := a[k*m:(k+1)*m], a[p*m:(p+1)*m]
			for j := k; j < m; j++ {
				rk[j], rp[j] = rp[j], rk[j]
			}
			det = -det
		}
		piv := a[k*m+k]
		det *= piv
		for i := k + 1; i < m; i++ {
			f := a[i*m+k] / piv
			if f == 0 {
				continue
			}
			ri, rk := a[i*m:(i+1)*m], a[k*m:(k+1)*m]
			for j := k + 1; j < m; j++ {
				ri[j] -= f * rk[j]
			}
		}
	}
	return det
}
