package patchrun

import (
	"context"
	"testing"

	"pdwave/infer"
)

// TestRunner: Done sees the patches of the range in id order with their
// grid origins and the result Work made for them, on any number of
// workers; a range outside the grid fails. Planted and seen to fail: the
// origin of patch id+1 handed to Work.
func TestRunner(t *testing.T) {
	g, err := infer.NewGrid(100, 70, 32, 8)
	if err != nil {
		t.Fatal(err)
	}
	for _, workers := range []int{1, 3} {
		var got []Patch
		rn := Runner[*int, Patch]{Grid: g, Workers: workers,
			NewWorker: func() (*int, error) { return new(int), nil },
			Work:      func(_ context.Context, w *int, p Patch) (Patch, bool) { *w++; return p, true },
			Done: func(p Patch, r Patch) error {
				if r != p {
					t.Errorf("patch %+v got the result of %+v", p, r)
				}
				got = append(got, p)
				return nil
			}}
		if err := rn.Run(context.Background(), 2, g.Count()); err != nil {
			t.Fatal(err)
		}
		want := Patches(g, 2, g.Count())
		if len(got) != len(want) {
			t.Fatalf("%d workers: %d patches done, want %d", workers, len(got), len(want))
		}
		for i, p := range got {
			x0, y0 := g.Origin(2 + i)
			if p != want[i] || p.ID != 2+i || p.X0 != x0 || p.Y0 != y0 {
				t.Errorf("%d workers: patch %d is %+v, want id %d at (%d, %d)", workers, i, p, 2+i, x0, y0)
			}
		}
	}
	rn := Runner[int, int]{Grid: g, NewWorker: func() (int, error) { return 0, nil },
		Work: func(context.Context, int, Patch) (int, bool) { return 0, true }}
	for _, r := range [][2]int{{-1, 3}, {0, g.Count() + 1}, {5, 4}} {
		if err := rn.Run(context.Background(), r[0], r[1]); err == nil {
			t.Errorf("range [%d, %d) of %d patches accepted", r[0], r[1], g.Count())
		}
	}
}
