package sim

import "sort"

// bandOrder orders the free nodes of a graph so that rods join nodes that
// are close in the order: reverse Cuthill–McKee (Cuthill & McKee 1969,
// reversed as proposed by George 1971), started in each connected component
// from a pseudo-peripheral node found by repeated breadth-first search
// (Gibbs, Poole & Stockmeyer 1976). A chain or ladder-like figure then has a
// narrow-banded Hessian whatever order its file lists the nodes in.
//
// It returns slot (node → position, -1 for nodes that are not free), order
// (position → node) and the node bandwidth: the largest difference of
// positions across an edge between two free nodes.
func bandOrder(n int, free []bool, edges [][2]int) (slot, order []int, bandwidth int) {
	adj := make([][]int, n)
	for _, e := range edges {
		a, b := e[0], e[1]
		if free[a] && free[b] && a != b {
			adj[a] = append(adj[a], b)
			adj[b] = append(adj[b], a)
		}
	}
	for i := range adj {
		nb := adj[i]
		sort.Slice(nb, func(x, y int) bool {
			if len(adj[nb[x]]) != len(adj[nb[y]]) {
				return len(adj[nb[x]]) < len(adj[nb[y]])
			}
			return nb[x] < nb[y]
		})
	}
	visited := make([]bool, n)
	level := make([]int, n)
	for i := range n {
		visited[i] = !free[i]
	}
	// bfs from s over unvisited nodes; returns the nodes of the last level.
	bfs := func(s int) (last []int, depth int) {
		for i := range level {
			level[i] = -1
		}
		level[s] = 0
		queue := []int{s}
		for h := 0; h < len(queue); h++ {
			v := queue[h]
			for _, w := range adj[v] {
				if level[w] < 0 && !visited[w] {
					level[w] = level[v] + 1
					queue = append(queue, w)
				}
			}
		}
		depth = level[queue[len(queue)-1]]
		for _, v := range queue {
			if level[v] == depth {
				last = append(last, v)
			}
		}
		return last, depth
	}
	for {
		start := -1
		for i := range n {
			if !visited[i] && (start < 0 || len(adj[i]) < len(adj[start])) {
				start = i
			}
		}
		if start < 0 {
			break
		}
		// Pseudo-peripheral node: move to the lowest-degree node of the
		// last level while that lengthens the search.
		last, depth := bfs(start)
		for range n {
			cand := last[0]
			for _, v := range last {
				if len(adj[v]) < len(adj[cand]) {
					cand = v
				}
			}
			l2, d2 := bfs(cand)
			if d2 <= depth {
				break
			}
			start, last, depth = cand, l2, d2
		}
		// Cuthill–McKee from start: breadth first, neighbours by degree.
		visited[start] = true
		from := len(order)
		order = append(order, start)
		for h := from; h < len(order); h++ {
			for _, w := range adj[order[h]] {
				if !visited[w] {
					visited[w] = true
					order = append(order, w)
				}
			}
		}
	}
	for i, j := 0, len(order)-1; i < j; i, j = i+1, j-1 {
		order[i], order[j] = order[j], order[i]
	}
	slot = make([]int, n)
	for i := range slot {
		slot[i] = -1
	}
	for p, v := range order {
		slot[v] = p
	}
	for _, e := range edges {
		if slot[e[0]] >= 0 && slot[e[1]] >= 0 {
			d := slot[e[0]] - slot[e[1]]
			if d < 0 {
				d = -d
			}
			bandwidth = max(bandwidth, d)
		}
	}
	return slot, order, bandwidth
}
