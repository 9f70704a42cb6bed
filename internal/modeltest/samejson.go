package modeltest

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"testing"
)

// DecodeJSON decodes a JSON document keeping numbers as json.Number (for
// SameJSON), failing the test on an error.
func DecodeJSON(t testing.TB, b []byte) any {
	t.Helper()
	var v any
	d := json.NewDecoder(bytes.NewReader(b))
	d.UseNumber()
	if err := d.Decode(&v); err != nil {
		t.Fatalf("%v\n%s", err, b)
	}
	return v
}

// SameJSON compares two documents decoded by DecodeJSON: strings, bools
// and integer-valued numbers exactly (counts, histogram counts, unit flags,
// findings), other numbers to rel relative, |a−b| ≤ rel·max(|a|,|b|) (sums
// taken in another order). It returns the largest relative difference it
// let through, or an error naming the first difference by its path.
func SameJSON(a, b any, rel float64) (maxRel float64, err error) {
	err = sameJSON("", a, b, rel, &maxRel)
	return maxRel, err
}

func sameJSON(path string, a, b any, rel float64, maxRel *float64) error {
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok || len(x) != len(y) {
			return fmt.Errorf("%s: %v vs %v", path, short(a), short(b))
		}
		for k := range x {
			if err := sameJSON(path+"."+k, x[k], y[k], rel, maxRel); err != nil {
				return err
			}
		}
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			return fmt.Errorf("%s: %d items vs %v", path, len(x), short(b))
		}
		for i := range x {
			if err := sameJSON(fmt.Sprintf("%s[%d]", path, i), x[i], y[i], rel, maxRel); err != nil {
				return err
			}
		}
	case json.Number:
		y, ok := b.(json.Number)
		if !ok {
			return fmt.Errorf("%s: %v vs %v", path, a, b)
		}
		if x == y {
			return nil
		}
		_, e1 := x.Int64()
		_, e2 := y.Int64()
		if e1 == nil || e2 == nil {
			return fmt.Errorf("%s: %v vs %v (integers differ)", path, x, y)
		}
		fx, _ := x.Float64()
		fy, _ := y.Float64()
		r := math.Abs(fx-fy) / math.Max(math.Abs(fx), math.Abs(fy))
		*maxRel = math.Max(*maxRel, r)
		if math.Abs(fx-fy) > rel*math.Max(math.Abs(fx), math.Abs(fy)) {
			return fmt.Errorf("%s: %v vs %v (relative %.3g)", path, x, y, r)
		}
	default:
		if a != b {
			return fmt.Errorf("%s: %v vs %v", path, a, b)
		}
	}
	return nil
}

func short(v any) string {
	s := fmt.Sprint(v)
	if len(s) > 120 {
		s = s[:120] + "..."
	}
	return s
}
