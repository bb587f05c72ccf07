package fits

import (
	"errors"
	"fmt"
	"sort"
	"time"
)

// HDU is one header-data unit for WriteFile: *Image or *Table.
type HDU interface{ isHDU() }

// Image is an image HDU. Dims lists the axis lengths, NAXIS1 (fastest)
// first; Data holds their product of values, written as IEEE float32
// (BITPIX −32; NaN and ±Inf are written as such). Name is the EXTNAME
// (required for extensions, optional for the primary HDU). Cards are added
// after the structural keywords, which they may not override.
type Image struct {
	Name  string
	Dims  []int
	Data  []float64
	Cards []Card
}

// Table is a binary-table HDU (FITS Standard 4.0 §7.3) named Name
// (EXTNAME). Every column has the same number of rows.
type Table struct {
	Name    string
	Columns []Column // in table order
	Cards   []Card   // added after the structural keywords
}

// Column is one table column; exactly one of Float, Int, Text is non-nil.
// Float holds rows × repeat values (every row the same length, written as
// TFORM "rD"), Int one 64-bit integer per row ("1K"), Text one printable
// ASCII string per row ("wA", w the longest string, blank padded).
//
// Dims, for a Float column only, gives the shape of each cell, the
// fastest-varying axis first, written as TDIMn = '(d1,d2,...)' (FITS
// Standard 4.0 §7.3.2): a frame-major frames × modes cell is
// Dims{modes, frames}, which astropy reads as an array of shape
// (rows, frames, modes). Its product must equal the cell length; nil
// writes no TDIMn.
type Column struct {
	Name, Unit string
	Float      [][]float64
	Int        []int64
	Text       []string
	Dims       []int
}

func (*Image) isHDU() {}
func (*Table) isHDU() {}

// WriteFile writes a FITS file of the given HDUs; the first must be an
// *Image (the primary HDU), the rest *Image or *Table extensions with a
// Name. The file is written to "<path>.tmp-XXXX" in the same directory,
// synced and renamed to path (pdwave/internal/atomicfile), so path never
// holds partial output. Errors name path.
func WriteFile(path string, hdus ...HDU) error {
	if err := writeFile(path, hdus); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

func writeFile(path string, hdus []HDU) error {
	if len(hdus) == 0 {
		return errors.New("no HDUs to write")
	}
	units := make([]dataUnit, 0, len(hdus))
	for i, h := range hdus {
		var u dataUnit
		var err error
		switch h := h.(type) {
		case *Image:
			if h == nil {
				return fmt.Errorf("HDU %d is nil", i+1)
			}
			if i > 0 && h.Name == "" {
				return fmt.Errorf("image extension %d has no Name (EXTNAME)", i+1)
			}
			u, err = encodeImage(h, i == 0, len(hdus) > 1)
		case *Table:
			if h == nil {
				return fmt.Errorf("HDU %d is nil", i+1)
			}
			if i == 0 {
				return errors.New("the primary HDU must be an *Image, not a table")
			}
			if h.Name == "" {
				return fmt.Errorf("table extension %d has no Name (EXTNAME)", i+1)
			}
			u, err = encodeTable(h)
		default:
			return fmt.Errorf("HDU %d has unsupported type %T", i+1, h)
		}
		if err != nil {
			return err
		}
		units = append(units, u)
	}
	return writeUnits(path, units)
}

// Provenance returns header cards recording what wrote a file:
// PDWVERS = version, DATE = the current UTC time (FITS Standard 4.0
// §4.4.2.1 format 'YYYY-MM-DDThh:mm:ss'), and one HISTORY card per setting,
// "pdwave: key = value", in key order (long values wrap over further
// HISTORY cards). WriteFile makes the text ASCII (ASCII).
func Provenance(version string, settings map[string]string) []Card {
	cards := []Card{
		{Key: "PDWVERS", Value: version, Comment: "pdwave version that wrote this file"},
		{Key: "DATE", Value: time.Now().UTC().Format("2006-01-02T15:04:05"), Comment: "file creation date (UTC)"},
	}
	keys := make([]string, 0, len(settings))
	for k := range settings {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		cards = append(cards, Card{Key: "HISTORY", Comment: "pdwave: " + k + " = " + settings[k]})
	}
	return cards
}
