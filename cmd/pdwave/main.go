package main

import (
	_ "github.com/astrogo/fitsio"
	_ "github.com/spf13/cobra"
	_ "gonum.org/v1/gonum/optimize"
	_ "gonum.org/v1/plot"
	_ "gopkg.in/yaml.v3"
	_ "gorgonia.org/gorgonia"
	_ "gorgonia.org/tensor"
)

func main() {}
