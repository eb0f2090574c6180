package sim

import (
	"fmt"
	"math"
)

// FitSettings tune Fit; the zero value means the defaults.
type FitSettings struct {
	LM    LMSettings
	Stats FitStatsSettings
	// Lower and Upper bound the parameters; nil means FitBounds.
	Lower, Upper []float64
	// HoldUndetermined refits, after a first fit that finds undetermined
	// directions, with every parameter of those directions held at its
	// nominal value, so that a written cell carries no value the data did
	// not choose. The held parameters keep After = Before and a standard
	// error of +Inf; Held marks them.
	HoldUndetermined bool
}

// FitResult is a finished (or interrupted) fit.
type FitResult struct {
	Params []FitParam
	Before []float64 // the nominal cell's values
	After  []float64 // the fitted values
	// StdErr is each fitted value's standard error (FitStats.StdErr).
	StdErr []float64
	// AtBound marks parameters that ended on a bound (their standard
	// errors are then not meaningful).
	AtBound []bool
	// Held marks parameters held at their nominal values
	// (FitSettings.HoldUndetermined).
	Held []bool
	// RMSBeforeM and RMSAfterM are the root mean square of the residual
	// coordinates at the nominal and the fitted values, m.
	RMSBeforeM, RMSAfterM float64
	Stats                 *FitStats
	LM                    *LMResult
	// Cell is the nominal cell with the fitted values.
	Cell *Cell
}

// Fit adjusts the problem's parameters to the runs by LevenbergMarquardt
// from the nominal cell's values, within bounds, and computes their
// statistics. progress is passed to LevenbergMarquardt (nil for none); an
// interrupted fit returns the best values so far with LM.Interrupted set.
func Fit(p *FitProblem, s FitSettings, progress func(iter int, cost float64) bool) (*FitResult, error) {
	if err := p.Check(); err != nil {
		return nil, err
	}
	res, err := fitOnce(p, s, progress)
	if err != nil || !s.HoldUndetermined || len(res.Stats.Undetermined) == 0 || res.LM.Interrupted {
		return res, err
	}
	n := len(p.Params)
	held := make([]bool, n)
	for _, dir := range res.Stats.Undetermined {
		for _, j := range dir {
			held[j] = true
		}
	}
	var keep []int
	for j := range n {
		if !held[j] {
			keep = append(keep, j)
		}
	}
	out := *res
	out.After = append([]float64(nil), res.Before...)
	out.StdErr = make([]float64, n)
	out.AtBound = make([]bool, n)
	out.Held = held
	for j := range n {
		out.StdErr[j] = math.Inf(1)
	}
	if len(keep) == 0 {
		out.Cell = WithFitValues(p.Cell, p.Params, out.After)
		out.RMSAfterM = out.RMSBeforeM
		return &out, nil
	}
	sub := *p
	sub.Params = make([]FitParam, len(keep))
	ss := s
	if s.Lower != nil && s.Upper != nil {
		ss.Lower, ss.Upper = make([]float64, len(keep)), make([]float64, len(keep))
	}
	for i, j := range keep {
		sub.Params[i] = p.Params[j]
		if ss.Lower != nil {
			ss.Lower[i], ss.Upper[i] = s.Lower[j], s.Upper[j]
		}
	}
	res2, err := fitOnce(&sub, ss, progress)
	if err != nil {
		return nil, err
	}
	for i, j := range keep {
		out.After[j] = res2.After[i]
		out.StdErr[j] = res2.StdErr[i]
		out.AtBound[j] = res2.AtBound[i]
	}
	out.RMSAfterM = res2.RMSAfterM
	out.LM = res2.LM
	st := *res2.Stats
	st.Undetermined = res.Stats.Undetermined // indices into p.Params
	out.Stats = &st
	out.Cell = WithFitValues(p.Cell, p.Params, out.After)
	return &out, nil
}

// fitOnce is Fit without holding undetermined parameters.
func fitOnce(p *FitProblem, s FitSettings, progress func(iter int, cost float64) bool) (*FitResult, error) {
	n := len(p.Params)
	before := make([]float64, n)
	FitValues(before, p.Cell, p.Params)
	lower, upper := s.Lower, s.Upper
	if lower == nil || upper == nil {
		lower, upper = make([]float64, n), make([]float64, n)
		FitBounds(lower, upper, before, p.Params)
	}
	nr := p.NumResiduals()
	if nr <= n {
		return nil, fmt.Errorf("fit: %d residuals (3 per marker sighting) cannot determine %d parameters", nr, n)
	}
	lm, err := LevenbergMarquardt(p.Residuals, nr, before, lower, upper, s.LM, progress)
	if err != nil {
		return nil, err
	}
	typical := make([]float64, n)
	FitTypical(typical, before, p.Params)
	st, err := FitStatistics(lm.Jacobian, lm.Residuals, typical, s.Stats)
	if err != nil {
		return nil, err
	}
	res := &FitResult{
		Params: p.Params, Before: before, After: lm.Theta, StdErr: st.StdErr, AtBound: make([]bool, n), Held: make([]bool, n),
		RMSBeforeM: math.Sqrt(lm.InitialCost / float64(nr)), RMSAfterM: math.Sqrt(lm.Cost / float64(nr)),
		Stats: st, LM: lm, Cell: WithFitValues(p.Cell, p.Params, lm.Theta),
	}
	for j := range n {
		res.AtBound[j] = lm.Theta[j] <= lower[j] || lm.Theta[j] >= upper[j]
	}
	return res, nil
}
