package simulate

// sfLag returns the mean of (φ(x+r)−φ(x))² over all pixel pairs separated
// by r pixels along x or along y inside the screen (no wrap-around: the
// subharmonics make screens non-periodic).
func sfLag(s []float64, n, r int) float64 {
	var sum float64
	for y := 0; y < n; y++ {
		row := s[y*n : y*n+n]
		for x := 0; x+r < n; x++ {
			d := row[x+r] - row[x]
			sum += d * d
		}
	}
	for y := 0; y+r < n; y++ {
		r0 := s[y*n : y*n+n]
		r1 := s[(y+r)*n : (y+r)*n+n]
		for x := range r0 {
			d := r1[x] - r0[x]
			sum += d * d
		}
	}
	return sum / float64(2*n*(n-r))
}
