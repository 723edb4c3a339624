package panel

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
)

// WriteCSV writes p in long format, one row per unit and month, units in
// panel order and months ascending. The columns are:
//
//	unit           unit ID
//	month          calendar month, YYYY-MM
//	first_treated  month of first treatment, YYYY-MM; empty for never treated
//	weight         matching weight (1 for treated units, 0 excluded)
//	cluster        cluster used for inference (the unit ID when none was set)
//	<outcome>...   one column per outcome, the count in that unit and month
//
// For example:
//
//	unit,month,first_treated,weight,cluster,geometry,attribute
//	t-017,2031-04,2031-09,1,t-017,3,0
//
// ReadCSV reads the file back with the same column names. When the units
// carry pre-period covariates (the doubly robust cs-att uses them), one
// column per covariate follows the outcomes, named CovariatePrefix and the
// covariate's name, so the file holds everything the estimators read.
func WriteCSV(w io.Writer, p *Panel) error {
	if err := p.Validate(); err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	lead := exportColumns()
	header := append(lead, p.Outcomes...)
	ncov := 0
	if len(p.Units) > 0 {
		ncov = len(p.Units[0].Covariates)
	}
	for k := range ncov {
		name := strconv.Itoa(k + 1)
		if k < len(p.CovariateNames) && p.CovariateNames[k] != "" {
			name = p.CovariateNames[k]
		}
		header = append(header, CovariatePrefix+name)
	}
	if err := cw.Write(header); err != nil {
		return fmt.Errorf("audit: write panel csv: %w", err)
	}
	row := make([]string, len(header))
	for u, un := range p.Units {
		ft := ""
		if un.FirstTreated >= 0 {
			ft = p.MonthTime(un.FirstTreated).Format("2006-01")
		}
		for t := range p.Months {
			row[0] = un.ID
			row[1] = p.MonthTime(t).Format("2006-01")
			row[2] = ft
			row[3] = strconv.FormatFloat(un.Weight, 'g', -1, 64)
			row[4] = un.cluster()
			for o := range p.Outcomes {
				row[len(lead)+o] = strconv.FormatFloat(p.Y[o][u*p.Months+t], 'g', -1, 64)
			}
			for k, c := range un.Covariates {
				row[len(lead)+len(p.Outcomes)+k] = strconv.FormatFloat(c, 'g', -1, 64)
			}
			if err := cw.Write(row); err != nil {
				return fmt.Errorf("audit: write panel csv: %w", err)
			}
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("audit: write panel csv: %w", err)
	}
	return nil
}

// exportColumns returns the leading columns of every file WriteCSV writes;
// the outcome columns follow them, then the covariate columns.
func exportColumns() []string { return []string{"unit", "month", "first_treated", "weight", "cluster"} }

// CovariatePrefix starts the name of each covariate column WriteCSV writes.
const CovariatePrefix = "covariate:"

// ExportDefaults recognises a header written by WriteCSV and returns the
// columns to read it back with: every outcome, the weight and cluster
// columns, and every covariate. ok is false for any other header.
func ExportDefaults(header []string) (cols Columns, ok bool) {
	lead := exportColumns()
	n := len(lead)
	if len(header) < n || !slices.Equal(header[:n], lead) {
		return Columns{}, false
	}
	cols = Columns{Unit: "unit", Time: "month", FirstTreated: "first_treated", Weight: "weight", Cluster: "cluster"}
	for _, h := range header[n:] {
		if strings.HasPrefix(h, CovariatePrefix) {
			cols.Covariates = append(cols.Covariates, h)
		} else {
			cols.Outcomes = append(cols.Outcomes, h)
		}
	}
	return cols, true
}

// Columns names the columns ReadCSV takes from a bring-your-own
// panel. Unit, Time, FirstTreated and at least one Outcome are required;
// Cluster and Weight are optional (default: the unit, weight 1).
type Columns struct {
	Unit         string   // unit identifier
	Time         string   // month: YYYY-MM or YYYY-MM-DD (the day is ignored)
	FirstTreated string   // month of first treatment; empty, "never", "NA" or "-" for never treated
	Outcomes     []string // count columns, one outcome each
	Cluster      string   // optional cluster for inference
	Weight       string   // optional matching weight
	Covariates   []string // optional pre-period covariates (constant within a unit) for the doubly robust cs-att
}

// CSVError is a problem at a position of a panel CSV file. It unwraps to
// ErrInvalid (and to the csv package's error for malformed CSV).
type CSVError struct {
	File   string
	Line   int    // 1-based line, 0 when the problem is the whole file
	Column string // column name, when one is at fault
	Err    error
}

func (e *CSVError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	if e.Column != "" {
		fmt.Fprintf(&b, ": column %q", e.Column)
	}
	fmt.Fprintf(&b, ": %v", e.Err)
	return b.String()
}

func (e *CSVError) Unwrap() []error { return []error{ErrInvalid, e.Err} }

// ReadCSV reads a long-format panel (one row per unit and month, any
// column order, extra columns ignored) from r; name is used in errors. The
// months of the file must form a complete grid: every unit has every month
// from the earliest to the latest exactly once. First-treated month, cluster
// and weight must be constant within a unit; a unit treated before the first
// month of the file is an error (its pre-period is missing).
func ReadCSV(r io.Reader, name string, cols Columns) (*Panel, error) {
	fail := func(line int, col string, format string, args ...any) error {
		return &CSVError{File: name, Line: line, Column: col, Err: fmt.Errorf(format, args...)}
	}
	if cols.Unit == "" || cols.Time == "" || cols.FirstTreated == "" || len(cols.Outcomes) == 0 {
		return nil, fail(0, "", "unit, time, first-treated and outcome columns must be named")
	}
	cr := csv.NewReader(r)
	cr.ReuseRecord = false
	header, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, fail(0, "", "empty file")
		}
		return nil, &CSVError{File: name, Line: 1, Err: err}
	}
	index := map[string]int{}
	for i, h := range header {
		index[strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))] = i
	}
	need := func(c string) (int, error) {
		if c == "" {
			return -1, nil
		}
		i, ok := index[c]
		if !ok {
			return 0, fail(1, c, "no such column in the header (%s)", strings.Join(header, ", "))
		}
		return i, nil
	}
	var iu, it, ift, icl, iw int
	for _, x := range []struct {
		dst *int
		c   string
	}{{&iu, cols.Unit}, {&it, cols.Time}, {&ift, cols.FirstTreated}, {&icl, cols.Cluster}, {&iw, cols.Weight}} {
		if *x.dst, err = need(x.c); err != nil {
			return nil, err
		}
	}
	icov := make([]int, len(cols.Covariates))
	for k, c := range cols.Covariates {
		if icov[k], err = need(c); err != nil {
			return nil, err
		}
	}
	iout := make([]int, len(cols.Outcomes))
	for o, c := range cols.Outcomes {
		if iout[o], err = need(c); err != nil {
			return nil, err
		}
	}
	type unitInfo struct {
		line    int
		ft      string
		ftMonth int // absolute month number, −1 never
		cluster string
		weight  float64
		cov     []float64
		vals    map[int][]float64 // absolute month → outcomes
		lines   map[int]int
	}
	units := map[string]*unitInfo{}
	var order []string
	minM, maxM := math.MaxInt, math.MinInt
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			// FieldPos is only valid after a successful Read; a malformed
			// record carries its position in the csv.ParseError.
			line := 0
			var pe *csv.ParseError
			if errors.As(err, &pe) {
				line = pe.Line
			}
			return nil, &CSVError{File: name, Line: line, Err: err}
		}
		line, _ := cr.FieldPos(0)
		id := strings.TrimSpace(rec[iu])
		if id == "" {
			return nil, fail(line, cols.Unit, "empty unit")
		}
		m, err := parseMonth(rec[it])
		if err != nil {
			return nil, fail(line, cols.Time, "%v", err)
		}
		ftText := strings.TrimSpace(rec[ift])
		ft := -1
		switch strings.ToLower(ftText) {
		case "", "never", "na", "-":
		default:
			if ft, err = parseMonth(ftText); err != nil {
				return nil, fail(line, cols.FirstTreated, "%v", err)
			}
		}
		cl := id
		if icl >= 0 {
			cl = strings.TrimSpace(rec[icl])
		}
		w := 1.0
		if iw >= 0 {
			w, err = strconv.ParseFloat(strings.TrimSpace(rec[iw]), 64)
			if err != nil || math.IsNaN(w) || math.IsInf(w, 0) || w < 0 {
				return nil, fail(line, cols.Weight, "weight %q is not a finite number >= 0", rec[iw])
			}
		}
		cov := make([]float64, len(icov))
		for k, i := range icov {
			v, err := strconv.ParseFloat(strings.TrimSpace(rec[i]), 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fail(line, cols.Covariates[k], "covariate %q is not a finite number", rec[i])
			}
			cov[k] = v
		}
		ui, ok := units[id]
		if !ok {
			ui = &unitInfo{line: line, ft: ftText, ftMonth: ft, cluster: cl, weight: w, cov: cov, vals: map[int][]float64{}, lines: map[int]int{}}
			units[id] = ui
			order = append(order, id)
		}
		switch {
		case ui.ftMonth != ft:
			return nil, fail(line, cols.FirstTreated, "unit %q has first-treated %q here but %q on line %d", id, ftText, ui.ft, ui.line)
		case ui.cluster != cl:
			return nil, fail(line, cols.Cluster, "unit %q has cluster %q here but %q on line %d", id, cl, ui.cluster, ui.line)
		case ui.weight != w:
			return nil, fail(line, cols.Weight, "unit %q has weight %v here but %v on line %d", id, w, ui.weight, ui.line)
		case !slices.Equal(ui.cov, cov):
			return nil, fail(line, "", "unit %q has covariates %v here but %v on line %d; covariates must be constant within a unit", id, cov, ui.cov, ui.line)
		}
		if prev, dup := ui.lines[m]; dup {
			return nil, fail(line, cols.Time, "unit %q, month %s already given on line %d", id, rec[it], prev)
		}
		vals := make([]float64, len(iout))
		for o, i := range iout {
			v, err := strconv.ParseFloat(strings.TrimSpace(rec[i]), 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
				return nil, fail(line, cols.Outcomes[o], "count %q is not a finite number >= 0", rec[i])
			}
			vals[o] = v
		}
		ui.vals[m] = vals
		ui.lines[m] = line
		minM, maxM = min(minM, m), max(maxM, m)
	}
	if len(order) == 0 {
		return nil, fail(0, "", "no data rows")
	}
	months := maxM - minM + 1
	// Completeness first, so that a few rows far apart in time cannot make
	// the grid below allocate units × months cells for nothing.
	for _, id := range order {
		ui := units[id]
		if len(ui.vals) != months {
			for m := minM; m <= maxM; m++ {
				if _, ok := ui.vals[m]; !ok {
					return nil, fail(ui.line, cols.Time, "unit %q has no row for month %s (the panel must be complete from %s to %s)",
						id, monthString(m), monthString(minM), monthString(maxM))
				}
			}
		}
	}
	p := &Panel{Start: time.Date(minM/12, time.Month(minM%12+1), 1, 0, 0, 0, 0, time.UTC), Months: months,
		Outcomes: slices.Clone(cols.Outcomes), Y: make([][]float64, len(cols.Outcomes))}
	for o := range p.Y {
		p.Y[o] = make([]float64, len(order)*months)
	}
	for u, id := range order {
		ui := units[id]
		ft := -1
		if ui.ftMonth >= 0 {
			ft = ui.ftMonth - minM
			if ft < 0 {
				return nil, fail(ui.line, cols.FirstTreated, "unit %q first treated %s, before the panel's first month %s", id, ui.ft, monthString(minM))
			}
			if ft >= months {
				return nil, fail(ui.line, cols.FirstTreated, "unit %q first treated %s, after the panel's last month %s", id, ui.ft, monthString(maxM))
			}
		}
		var cov []float64
		if len(ui.cov) > 0 {
			cov = ui.cov
		}
		p.Units = append(p.Units, Unit{ID: id, FirstTreated: ft, Weight: ui.weight, Cluster: ui.cluster, Covariates: cov})
		for m, vals := range ui.vals {
			for o, v := range vals {
				p.Y[o][u*months+m-minM] = v
			}
		}
	}
	if err := p.Validate(); err != nil {
		return nil, &CSVError{File: name, Err: err}
	}
	return p, nil
}

// parseMonth parses YYYY-MM or YYYY-MM-DD into an absolute month number
// year·12 + month − 1.
func parseMonth(s string) (int, error) {
	s = strings.TrimSpace(s)
	var t time.Time
	var err error
	if len(s) == 7 {
		t, err = time.Parse("2006-01", s)
	} else {
		t, err = time.Parse("2006-01-02", s)
	}
	if err != nil {
		return 0, fmt.Errorf("month %q: want YYYY-MM or YYYY-MM-DD", s)
	}
	return t.Year()*12 + int(t.Month()) - 1, nil
}

func monthString(m int) string { return fmt.Sprintf("%04d-%02d", m/12, m%12+1) }
