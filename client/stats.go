package client

import (
	"math"
	"slices"
)

// Spread summarises a sample: median, 99th percentile, largest, mean.
type Spread struct {
	N    int     `json:"n"`
	P50  float64 `json:"p50"`
	P99  float64 `json:"p99"`
	Max  float64 `json:"max"`
	Mean float64 `json:"mean"`
}

// SpreadOf summarises xs scaled by scale (for example 1e3 for s to ms).
// Percentiles are nearest-rank (the smallest value with at least p% of
// the sample at or below it), so they are always observed values. An
// empty sample gives zeros.
func SpreadOf(xs []float64, scale float64) Spread {
	if len(xs) == 0 {
		return Spread{}
	}
	s := slices.Clone(xs)
	slices.Sort(s)
	var sum float64
	for _, x := range s {
		sum += x
	}
	return Spread{
		N:    len(s),
		P50:  scale * nearestRank(s, 50),
		P99:  scale * nearestRank(s, 99),
		Max:  scale * s[len(s)-1],
		Mean: scale * sum / float64(len(s)),
	}
}

func nearestRank(sorted []float64, p float64) float64 {
	k := int(math.Ceil(p/100*float64(len(sorted)))) - 1
	k = max(0, min(k, len(sorted)-1))
	return sorted[k]
}
