package plots

import (
	"cmp"
	"math"
	"slices"
	"strings"
	"unicode"

	"github.com/vitals-health/vitals/internal/actkind"
	"github.com/vitals-health/vitals/report"
)

// isActivation reports whether a layer is an activation layer: the
// statistics tagged it (Layer.Activation, which also covers activations
// exported as subgraphs such as x·sigmoid(x)) or its operator is in the one
// list of activation operators (internal/actkind).
func isActivation(l *report.Layer) bool {
	return l.Activation != "" || actkind.Is(l.Op)
}

// activationListNote names the operators counted as activations, for the
// notes on figures that have nothing to show.
var activationListNote = "activation operators: " + strings.Join(actkind.Names(), ", ") +
	"; GELU written as x·½·(1+erf(x/√2)) and SiLU as x·sigmoid(x) are recognised too"

// activationLayers returns the activation layers in depth order (stable).
func activationLayers(r *report.Report) []*report.Layer {
	var out []*report.Layer
	for i := range r.Layers {
		if isActivation(&r.Layers[i]) {
			out = append(out, &r.Layers[i])
		}
	}
	slices.SortStableFunc(out, func(a, b *report.Layer) int { return cmp.Compare(a.Depth, b.Depth) })
	return out
}

// flagged returns, per node, the highest severity level of its findings at
// warning level or above.
func flagged(r *report.Report) map[string]int {
	m := map[string]int{}
	for _, f := range r.Findings {
		if lv := f.Severity.Level(); lv >= 1 && lv > m[f.Node] {
			m[f.Node] = lv
		}
	}
	return m
}

// threshold returns r.Thresholds[key], or def when missing or not finite.
func threshold(r *report.Report, key string, def float64) float64 {
	if v, ok := r.Thresholds[key]; ok && finite(v) {
		return v
	}
	return def
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// val returns *p and whether it is a finite number.
func val(p *float64) (float64, bool) {
	if p == nil || !finite(*p) {
		return 0, false
	}
	return *p, true
}

// shortName shortens a scoped node name to at most max characters, keeping
// the informative tail: "/layer3/layer3.1/relu_1/Relu" → "layer3.1/relu_1".
// A trailing operator-type component ("Relu", "Conv") is dropped when a scope
// precedes it, then the last two components are kept if they fit, else the
// last one, else its tail behind "…".
func shortName(name string, max int) string {
	var parts []string
	for _, p := range strings.Split(name, "/") {
		if p != "" {
			parts = append(parts, p)
		}
	}
	if len(parts) == 0 {
		return clipLeft(name, max)
	}
	if len(parts) > 1 && opLike(parts[len(parts)-1]) {
		parts = parts[:len(parts)-1]
	}
	if len(parts) >= 2 {
		if s := parts[len(parts)-2] + "/" + parts[len(parts)-1]; len([]rune(s)) <= max {
			return s
		}
	}
	return clipLeft(parts[len(parts)-1], max)
}

// shortNames shortens a list of node names with shortName; names that would
// come out the same keep their operator component ("head/GlobalAveragePool")
// and, if still ambiguous, show their last non-operator component prefixed
// with the nearest path component that tells them apart from the others
// ("features.3/…/conv.0.2" in a MobileNet, whose blocks repeat the same inner
// names), or failing that the full name clipped from the left.
func shortNames(names []string, max int) []string {
	out := make([]string, len(names))
	parts := make([][]string, len(names))
	for i, n := range names {
		out[i] = shortName(n, max)
		parts[i] = strings.Split(strings.Trim(n, "/"), "/")
	}
	tail := make([]int, len(names)) // path components out[i] shows
	for _, members := range sameLabel(out) {
		for _, i := range members {
			p := parts[i]
			tail[i] = min(2, len(p))
			out[i] = clipLeft(strings.Join(p[len(p)-tail[i]:], "/"), max)
		}
	}
	for _, members := range sameLabel(out) {
		for _, i := range members {
			p := parts[i]
			last := len(p) - 1 // the label's end: the last component, not the shared operator
			if last > 0 && opLike(p[last]) {
				last--
			}
			out[i] = clipLeft(names[i], max)
			for j := min(len(p)-tail[i], last) - 1; j >= 0; j-- {
				unique := true
				for _, o := range members {
					if o != i && len(parts[o]) == len(p) && parts[o][j] == p[j] {
						unique = false
						break
					}
				}
				if s := p[j] + "/…/" + p[last]; unique && len([]rune(s)) <= max {
					out[i] = s
					break
				}
			}
		}
	}
	return out
}

// sameLabel groups the indices of labels that occur more than once.
func sameLabel(labels []string) map[string][]int {
	group := map[string][]int{}
	for i, s := range labels {
		group[s] = append(group[s], i)
	}
	for s, members := range group {
		if len(members) < 2 {
			delete(group, s)
		}
	}
	return group
}

// opLike reports whether s looks like an ONNX operator type: an upper-case
// initial followed by letters, digits or underscores ("Relu", "Conv_3").
func opLike(s string) bool {
	for i, c := range s {
		if i == 0 && !unicode.IsUpper(c) {
			return false
		}
		if !unicode.IsLetter(c) && !unicode.IsDigit(c) && c != '_' {
			return false
		}
	}
	return s != ""
}

// clipLeft keeps the last max-1 runes of s behind "…" when s is longer than max.
func clipLeft(s string, max int) string {
	r := []rune(s)
	if len(r) <= max || max < 2 {
		return s
	}
	return "…" + string(r[len(r)-max+1:])
}

// decades is log10(max/min) of the positive finite values, 0 when fewer than two.
func decades(vs []float64) float64 {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range vs {
		if v > 0 && finite(v) {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	if hi <= lo {
		return 0
	}
	return math.Log10(hi / lo)
}

// logRange pads [lo, hi] outwards to whole-ish decades for a log axis.
func logRange(lo, hi float64) (float64, float64) {
	return math.Pow(10, math.Floor(math.Log10(lo)*4)/4-0.1), math.Pow(10, math.Ceil(math.Log10(hi)*4)/4+0.1)
}

// nodeTicks labels x = 0..n-1 with shortened names when they fit side by
// side or vertically, else with indices; it reports whether to rotate.
func nodeTicks(names []string) ([]Tick, bool) {
	n := len(names)
	ticks := make([]Tick, n)
	if n == 0 {
		return ticks, false
	}
	// About 1000 px of plot width, ~7.5 px per character at the tick font size,
	// ~16 px per line of rotated text.
	slot := 1000.0 / float64(n)
	longest := 0
	short := make([]string, n)
	for i, s := range shortNames(names, 22) {
		short[i] = s
		longest = max(longest, len([]rune(s)))
	}
	switch {
	case float64(longest)*7.5+8 <= slot:
		for i := range ticks {
			ticks[i] = Tick{X: float64(i), Label: short[i]}
		}
		return ticks, false
	case slot >= 17:
		for i := range ticks {
			ticks[i] = Tick{X: float64(i), Label: short[i]}
		}
		return ticks, true
	}
	step := 1
	for float64(step)*slot < 30 {
		step++
	}
	for i := range ticks {
		ticks[i] = Tick{X: float64(i)}
		if i%step == 0 {
			ticks[i].Label = itoa(i)
		}
	}
	return ticks, false
}
