package main

// Keep the pinned modules in go.mod until the packages that use them land.
import (
	_ "github.com/astrogo/fitsio"
	_ "gonum.org/v1/gonum/optimize"
	_ "gonum.org/v1/plot"
	_ "gopkg.in/yaml.v3"
	_ "gorgonia.org/gorgonia"
	_ "gorgonia.org/tensor"
)
