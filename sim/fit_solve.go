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
	st, err := FitStatistics(lm.Jacobian, lm.Residuals, s.Stats)
	if err != nil {
		return nil, err
	}
	res := &FitResult{
		Params: p.Params, Before: before, After: lm.Theta, StdErr: st.StdErr, AtBound: make([]bool, n),
		RMSBeforeM: math.Sqrt(lm.InitialCost / float64(nr)), RMSAfterM: math.Sqrt(lm.Cost / float64(nr)),
		Stats: st, LM: lm, Cell: WithFitValues(p.Cell, p.Params, lm.Theta),
	}
	for j := range n {
		res.AtBound[j] = lm.Theta[j] <= lower[j] || lm.Theta[j] >= upper[j]
	}
	return res, nil
}
