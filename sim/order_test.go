package sim

import (
	"math/rand/v2"
	"testing"
)

// Reverse Cuthill–McKee must find a narrow band for shuffled chains,
// ladders and grids whatever order the nodes are listed in. Every edge
// joins nodes in the same or adjacent breadth-first levels, so the
// bandwidth is below the size of two consecutive levels: at most 2w − 1
// for a grid w nodes wide (for w = 1, a chain, that is the optimum 1;
// Cuthill & McKee 1969). The shuffled numbering's own bandwidth is far
// larger, which the test also checks so the bound means something.
func TestBandOrderFindsNarrowBand(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	grid := func(w, h int) (int, [][2]int) {
		var e [][2]int
		for y := range h {
			for x := range w {
				i := y*w + x
				if x+1 < w {
					e = append(e, [2]int{i, i + 1})
				}
				if y+1 < h {
					e = append(e, [2]int{i, i + w})
				}
			}
		}
		return w * h, e
	}
	for _, c := range []struct {
		name      string
		w, h      int
		wantBandW int // upper bound
	}{{"chain", 1, 40, 1}, {"ladder", 2, 30, 3}, {"grid", 3, 20, 5}} {
		n, edges := grid(c.w, c.h)
		// Shuffle the node numbering.
		perm := rng.Perm(n)
		for k := range edges {
			edges[k] = [2]int{perm[edges[k][0]], perm[edges[k][1]]}
		}
		free := make([]bool, n)
		for i := range free {
			free[i] = true
		}
		shuffled := 0
		for _, e := range edges {
			shuffled = max(shuffled, e[0]-e[1], e[1]-e[0])
		}
		slot, order, bw := bandOrder(n, free, edges)
		if bw > c.wantBandW || shuffled < 4*c.wantBandW {
			t.Errorf("%s: bandwidth %d, want at most %d (shuffled numbering: %d)", c.name, bw, c.wantBandW, shuffled)
		}
		if len(order) != n {
			t.Fatalf("%s: order has %d nodes, want %d", c.name, len(order), n)
		}
		for p, v := range order {
			if slot[v] != p {
				t.Fatalf("%s: slot and order are not inverse", c.name)
			}
		}
	}
	// Anchored nodes are left out; disconnected parts are all ordered.
	free := []bool{true, false, true, true, true}
	slot, order, bw := bandOrder(5, free, [][2]int{{0, 1}, {1, 2}, {3, 4}})
	if len(order) != 4 || slot[1] != -1 || bw != 1 {
		t.Errorf("anchored/disconnected: order %v slot %v bandwidth %d", order, slot, bw)
	}
}
