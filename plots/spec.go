package plots

import "image/color"

// Point is one finite (x, y) value.
type Point struct{ X, Y float64 }

// Style is how a series is drawn.
type Style int

// Series styles.
const (
	Solid  Style = iota // solid line
	Dashed              // dashed line
	Dotted              // dotted line
)

// Shape is the marker of a point series.
type Shape int

// Marker shapes.
const (
	Circle   Shape = iota // filled circle
	Triangle              // filled triangle
	Square                // filled square
)

// Series is a named sequence of finite points drawn in one style and colour.
type Series struct {
	Name   string // legend entry; empty for none
	Points []Point
	Style  Style
	Shape  Shape
	Color  color.RGBA
	// Marks draws the Shape marker at every point of a line series too.
	Marks bool
	// Width is the bar width in x data units (bar series only).
	Width float64
	// Offset shifts bars along x in data units (bar series only).
	Offset float64
}

// Band is a shaded area between two curves sampled at the same x values.
type Band struct {
	Name         string
	Lower, Upper []Point
	Color        color.RGBA
}

// HLine is a labelled horizontal reference line across the whole x range.
type HLine struct {
	Name  string
	Y     float64
	Style Style
	Color color.RGBA
}

// Tick labels one position on the x axis.
type Tick struct {
	X     float64
	Label string
}

// Chart is the specification of one single-panel figure.
type Chart struct {
	File                   string // file name, e.g. "depth-profile.png"
	Title                  string
	XLabel, YLabel         string
	XMin, XMax, YMin, YMax float64
	LogY                   bool
	Ticks                  []Tick
	// RotateTicks draws the tick labels vertically (long names, many layers).
	RotateTicks bool
	Band        *Band
	Bars        []Series
	Lines       []Series
	Markers     []Series
	HLines      []HLine
	// Note is a line of small print under the plot (e.g. what was left out).
	Note string
}

// Hist is one histogram outline: len(Counts) == len(Edges)-1.
type Hist struct {
	Name   string // legend entry, e.g. "OLD"
	Edges  []float64
	Counts []float64
	Style  Style
	Color  color.RGBA
	Fill   bool
}

// Panel is one small histogram plot of a grid page.
type Panel struct {
	Node           string
	Title          string
	XLabel, YLabel string
	XMin, XMax     float64
	YMin, YMax     float64
	LogY           bool
	Hists          []Hist
}

// Page is one grid of histogram panels written to one file.
type Page struct {
	File   string
	Title  string
	Cols   int
	Rows   int
	Panels []Panel // row-major, at most Cols*Rows
	// Legend lists the outline styles when panels overlay several histograms.
	Legend []Hist
}

// Compare is the specification of the comparison figures.
type Compare struct {
	Pages []Page
	Depth *Chart
}
