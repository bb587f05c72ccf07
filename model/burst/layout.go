package burst

import (
	"errors"
	"fmt"
	"slices"
	"strings"

	"pdwave/model/fits"
)

// chooseImages returns the image HDUs holding the burst's channels (see
// Options.HDUs): one HDU, or two for the focused and defocused channels.
func chooseImages(f *fits.File, sel []string) ([]*fits.Unit, error) {
	switch len(sel) {
	case 0:
		return defaultImages(f)
	case 1, 2:
		var out []*fits.Unit
		for _, s := range sel {
			u, err := f.Find(s)
			if err != nil {
				return nil, err
			}
			if !u.IsImage() {
				return nil, fmt.Errorf("%s holds no image", u)
			}
			out = append(out, u)
		}
		return out, nil
	}
	return nil, fmt.Errorf("%d HDUs chosen; give one (the burst) or two (focused, defocused)", len(sel))
}

// defaultImages picks the first HDU with a non-empty image and, when that
// image has one channel, the next non-empty image HDU of the same shape
// that is not the OBJECT extension. Without a non-empty image the first
// image HDU with axes is returned, so that its emptiness is reported.
func defaultImages(f *fits.File) ([]*fits.Unit, error) {
	var first *fits.Unit
	for _, u := range f.HDUs {
		if u.IsImage() && !u.Empty() {
			first = u
			break
		}
	}
	if first == nil {
		for _, u := range f.HDUs {
			if ax, err := u.ImageAxes(); err == nil && len(ax) > 0 {
				return []*fits.Unit{u}, nil
			}
		}
		if len(f.HDUs) > 0 {
			if _, err := f.HDUs[0].ImageAxes(); err != nil {
				return nil, err
			}
		}
		return nil, errors.New("the file holds no image (every HDU has NAXIS = 0)")
	}
	ax, _ := first.ImageAxes()
	if !oneChannel(ax) {
		return []*fits.Unit{first}, nil
	}
	for _, u := range f.HDUs[first.Index+1:] {
		if !u.IsImage() || u.Empty() || strings.EqualFold(strings.TrimSpace(u.Name), "OBJECT") {
			continue
		}
		if ax2, err := u.ImageAxes(); err == nil && slices.Equal(ax, ax2) {
			return []*fits.Unit{first, u}, nil
		}
	}
	return []*fits.Unit{first}, nil
}

// oneChannel reports whether an image of these axes is one channel: 2-D,
// 3-D, or 4-D with NAXIS4 = 1.
func oneChannel(ax []int) bool {
	return len(ax) == 2 || len(ax) == 3 || (len(ax) == 4 && ax[3] == 1)
}

// imageHeader returns the header describing the image in u: u's own cards
// then, for an extension, the primary header's cards whose keywords u
// lacks (the primary header of an extension file usually holds the
// observation's keywords). The cards of the tiled-image convention and of
// the table structure are left out of a compressed image's header.
func imageHeader(f *fits.File, u *fits.Unit) *fits.Header {
	var cards []fits.Card
	have := map[string]bool{}
	add := func(h *fits.Header, inherit bool) {
		for _, c := range h.Cards {
			if u.Compressed() && compressionKey(c.Key) {
				continue
			}
			if inherit && !fits.IsCommentary(c.Key) && have[c.Key] {
				continue
			}
			have[c.Key] = true
			cards = append(cards, c)
		}
	}
	add(u.Header, false)
	if u.Index > 0 {
		add(f.HDUs[0].Header, true)
	}
	return fits.NewHeader(cards)
}

// compressionKey reports the keywords of the tiled-image convention (FITS
// Standard 4.0 §10.1), which describe the compressed table rather than the
// image.
func compressionKey(k string) bool {
	switch k {
	case "ZIMAGE", "ZBITPIX", "ZNAXIS", "ZCMPTYPE", "ZQUANTIZ", "ZDITHER0", "ZSIMPLE", "ZTENSION",
		"ZEXTEND", "ZBLOCKED", "ZPCOUNT", "ZGCOUNT", "ZHECKSUM", "ZDATASUM", "ZSCALE", "ZZERO", "ZBLANK", "ZMASKCMP":
		return true
	}
	for _, p := range []string{"ZNAXIS", "ZTILE", "ZNAME", "ZVAL"} {
		if strings.HasPrefix(k, p) && len(k) > len(p) && strings.Trim(k[len(p):], "0123456789") == "" {
			return true
		}
	}
	return false
}

// readPixels records the planes of the chosen image HDUs in p (read
// later, a frame at a time, by Burst.load).
func (p *part) readPixels(units []*fits.Unit, lim fits.Limits) error {
	for i, u := range units {
		ax, err := u.ImageAxes()
		if err != nil {
			return err
		}
		nch, frames, err := channelAxes(ax, len(units) == 1)
		if err != nil {
			if len(units) > 1 || u.Index > 0 {
				return fmt.Errorf("%s: %w", u, err)
			}
			return err
		}
		if i > 0 && (ax[0] != p.nx || ax[1] != p.ny || frames != len(p.planes[0])) {
			return fmt.Errorf("%s is %v but %s is %v", units[0], []int{p.nx, p.ny, len(p.planes[0])}, u, ax)
		}
		if _, err := u.Planes(); err != nil {
			return err
		}
		max := lim.MaxBytes
		if max <= 0 {
			max = fits.DefaultMaxBytes
		}
		if int64(ax[0])*int64(ax[1]) > max/8/int64(nch*frames) {
			return fmt.Errorf("%s: image %v is more than the limit of %d bytes as float64", u, ax, max)
		}
		p.nx, p.ny, p.axes = ax[0], ax[1], ax
		for c := 0; c < nch; c++ {
			planes := make([]plane, frames)
			for f := range planes {
				// NAXIS3 (frame) varies faster than NAXIS4 (channel).
				planes[f] = plane{u, c*frames + f}
			}
			p.planes = append(p.planes, planes)
		}
	}
	return nil
}

// channelAxes returns the number of channels (1 or 2) and frames of an
// image with axes ax. both says whether the image may hold both channels.
func channelAxes(ax []int, both bool) (channels, frames int, err error) {
	switch {
	case len(ax) < 2 || len(ax) > 4:
		return 0, 0, fmt.Errorf("the image has NAXIS = %d (axes %v); a burst needs NAXIS = 4: nx, ny, frames, 2 channels (or NAXIS = 2 or 3 for one channel)", len(ax), ax)
	case ax[0] == 0 || ax[1] == 0:
		return 0, 0, fmt.Errorf("the images are empty (NAXIS1 = %d, NAXIS2 = %d)", ax[0], ax[1])
	case len(ax) == 2:
		return 1, 1, nil
	case ax[2] == 0:
		return 0, 0, errors.New("NAXIS3 = 0: the burst has no frames")
	case len(ax) == 3 || ax[3] == 1:
		return 1, ax[2], nil
	case ax[3] != 2:
		return 0, 0, fmt.Errorf("NAXIS4 = %d; a burst has exactly 2 channels (focused, defocused)", ax[3])
	case !both:
		return 0, 0, errors.New("the image holds two channels (NAXIS4 = 2) but one channel was expected")
	}
	return 2, ax[2], nil
}

// checkVersion refuses a burst contract newer than Version.
func checkVersion(h *fits.Header) error {
	v, ok, err := h.Number("BURSTVER")
	if err != nil {
		return err
	}
	if ok && v > Version {
		return fmt.Errorf("burst contract version BURSTVER = %v is newer than this program reads (%d)", v, Version)
	}
	return nil
}

// extensions reads the TRUTH and OBJECT extensions, if present, into p.
func (p *part) extensions(f *fits.File) error {
	frames := len(p.planes[0])
	for _, u := range f.HDUs[1:] {
		switch strings.TrimSpace(u.Name) {
		case "TRUTH":
			t, err := readTruth(u, frames)
			if err != nil {
				return fmt.Errorf("TRUTH extension: %w", err)
			}
			p.truth = t
		case "OBJECT":
			if u.Xtension != "IMAGE" {
				return fmt.Errorf("OBJECT extension: is a %s, want an IMAGE", u.Xtension)
			}
			ax, _ := u.ImageAxes()
			if len(ax) != 2 || ax[0] != p.nx || ax[1] != p.ny {
				return fmt.Errorf("OBJECT extension: axes %v, want [%d %d]", ax, p.nx, p.ny)
			}
			o, err := u.Image()
			if err != nil {
				return fmt.Errorf("OBJECT extension: %w", err)
			}
			if err := checkFinite(o, p.nx); err != nil {
				return fmt.Errorf("OBJECT extension: %w", err)
			}
			p.object = o
		}
	}
	return nil
}

// readTruth reads the TRUTH binary table u: the BASIS and NMODES keywords,
// one row per frame of the COEFFS column and, when present, of the NOLL
// column (each NMODES finite floating-point values).
func readTruth(u *fits.Unit, frames int) (*Truth, error) {
	if u.Xtension != "BINTABLE" {
		return nil, fmt.Errorf("is a %s, want a BINTABLE", u.Xtension)
	}
	t := &Truth{}
	if s, _, _ := u.Header.String("BASIS"); strings.TrimSpace(s) != "" {
		t.Basis = strings.TrimSpace(s)
	} else {
		return nil, errors.New("header keyword BASIS (string) is missing")
	}
	nm, ok, err := u.Header.Int("NMODES")
	if err != nil || !ok || nm < 1 {
		return nil, errors.New("header keyword NMODES (integer >= 1) is missing or invalid")
	}
	t.Modes = nm
	rows, err := u.Rows()
	if err != nil {
		return nil, err
	}
	if rows != frames {
		return nil, fmt.Errorf("%d rows for %d frames", rows, frames)
	}
	for _, name := range []string{"COEFFS", "NOLL"} {
		col, err := u.FloatColumn(name)
		if fits.IsNoColumn(err) {
			if name == "COEFFS" {
				return nil, errors.New("column COEFFS is missing")
			}
			continue
		}
		if err != nil {
			return nil, err
		}
		for _, row := range col {
			if len(row) != t.Modes {
				return nil, fmt.Errorf("column %s has %d values per row, NMODES = %d", name, len(row), t.Modes)
			}
			for _, x := range row {
				if x != x || x-x != 0 {
					return nil, fmt.Errorf("column %s: value %v", name, x)
				}
			}
		}
		if name == "COEFFS" {
			t.Coeffs = col
		} else {
			t.Noll = col
		}
	}
	return t, nil
}
