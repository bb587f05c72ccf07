package fits

import (
	"fmt"
	"math"
	"math/big"
	"regexp"
	"strconv"
	"strings"
)

// Header is a header as read from a file: its cards in file order (END
// excluded, CONTINUE long strings joined into the card they continue), and
// notes on departures from FITS Standard 4.0 met while reading it.
type Header struct {
	Cards []Card
	// Notes are human-readable remarks (a lowercase exponent letter, a
	// keyword given twice, a value that is not FITS); a reader passes them
	// on as warnings.
	Notes []string
	first map[string]int // keyword → index of its first card
}

// Get returns the first card with the keyword key (FITS keywords are upper
// case; key is matched exactly). Of a keyword given more than once the
// first card counts, as in astropy's Header[key]; ParseHeader notes the
// repetition. Commentary keywords are not looked up.
func (h *Header) Get(key string) (Card, bool) {
	if h == nil || h.first == nil {
		return Card{}, false
	}
	i, ok := h.first[key]
	if !ok {
		return Card{}, false
	}
	return h.Cards[i], true
}

// Number returns the value of the keyword key as float64: ok is false when
// the keyword is absent or undefined (blank value); err is set when it is
// present with a value that is not a finite number (a string, a logical,
// an Unparsed field). An explicit 0 is returned with ok true.
func (h *Header) Number(key string) (v float64, ok bool, err error) {
	c, found := h.Get(key)
	if !found || c.Value == nil {
		return 0, false, nil
	}
	v, isNum := Number(c.Value)
	if !isNum || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false, fmt.Errorf("keyword %s = %v is not a finite number", key, c.Value)
	}
	return v, true, nil
}

// Int returns the value of the keyword key as an integer: ok false when
// absent or undefined, err when present but not an integer value
// (FITS Standard 4.0 §4.2.3; a real such as 3.0 is refused).
func (h *Header) Int(key string) (v int, ok bool, err error) {
	c, found := h.Get(key)
	if !found || c.Value == nil {
		return 0, false, nil
	}
	n, isInt := c.Value.(int)
	if !isInt {
		return 0, false, fmt.Errorf("keyword %s = %v is not an integer", key, c.Value)
	}
	return n, true, nil
}

// String returns the string value of the keyword key, trailing blanks
// removed: ok false when absent or undefined, err when not a string.
func (h *Header) String(key string) (s string, ok bool, err error) {
	c, found := h.Get(key)
	if !found || c.Value == nil {
		return "", false, nil
	}
	s, isStr := c.Value.(string)
	if !isStr {
		return "", false, fmt.Errorf("keyword %s = %v is not a string", key, c.Value)
	}
	return s, true, nil
}

// Bool returns the logical value of the keyword key (ok false when absent
// or not logical).
func (h *Header) Bool(key string) (v, ok bool) {
	c, found := h.Get(key)
	if !found {
		return false, false
	}
	v, ok = c.Value.(bool)
	return v, ok
}

// NewHeader returns a header of the given cards (not copied), for lookups
// with Get; its Notes are empty. Of repeated keywords the first counts.
func NewHeader(cards []Card) *Header {
	h := &Header{Cards: cards, first: map[string]int{}}
	for i, c := range cards {
		if _, seen := h.first[c.Key]; !seen && !isCommentary(c.Key) {
			h.first[c.Key] = i
		}
	}
	return h
}

// ParseHeader parses header card images (a multiple of 80 bytes, up to and
// including the END card or the end of raw) into a Header. Each card is read
// as FITS Standard 4.0 §4.1–4.2 says: a value card has "= " in columns 9–10
// and its value is parsed with ParseValue; commentary cards (COMMENT,
// HISTORY, blank keyword, and any card without a value indicator) keep
// their text in Comment; a string ending in '&' followed by CONTINUE cards
// is joined (§4.2.1.2). HIERARCH cards keep the words after HIERARCH as Key.
// A keyword given twice is noted once (the first card counts, see Get).
// ParseHeader never fails on bad card contents; it notes them.
func ParseHeader(raw []byte) *Header {
	h := &Header{first: map[string]int{}}
	dups := map[string]bool{}
	var dupOrder []string
	for p := 0; p+cardSize <= len(raw); p += cardSize {
		card := string(raw[p : p+cardSize])
		key := strings.TrimRight(card[:8], " ")
		if key == "END" {
			break
		}
		if key == "CONTINUE" && h.continueString(card) {
			continue
		}
		c, note := parseCard(card)
		if note != "" {
			h.Notes = append(h.Notes, note)
		}
		if !isCommentary(c.Key) {
			if _, seen := h.first[c.Key]; seen {
				if !dups[c.Key] {
					dupOrder = append(dupOrder, c.Key)
				}
				dups[c.Key] = true
			} else {
				h.first[c.Key] = len(h.Cards)
			}
		}
		h.Cards = append(h.Cards, c)
	}
	if len(dupOrder) > 0 {
		h.Notes = append(h.Notes, fmt.Sprintf("keyword %s given more than once; the first value is used (as astropy reads it)", strings.Join(dupOrder, ", ")))
	}
	return h
}

// continueString appends a CONTINUE card's string to the previous card if
// that card's string value ends in '&' (FITS Standard 4.0 §4.2.1.2) and
// reports whether it did.
func (h *Header) continueString(card string) bool {
	if len(h.Cards) == 0 {
		return false
	}
	prev := &h.Cards[len(h.Cards)-1]
	s, ok := prev.Value.(string)
	if !ok || !strings.HasSuffix(s, "&") {
		return false
	}
	piece, comment, ok := parseString(card[8:])
	if !ok {
		return false
	}
	prev.Value = s[:len(s)-1] + piece
	if comment != "" {
		prev.Comment = comment
	}
	return true
}

// parseCard parses one 80-character card; note is non-empty when the card
// departs from the standard.
func parseCard(card string) (Card, string) {
	key := strings.TrimRight(card[:8], " ")
	if key == "HIERARCH" {
		// ESO HIERARCH convention: "HIERARCH A B C = value".
		if i := strings.IndexByte(card, '='); i > 9 {
			c := Card{Key: strings.TrimSpace(card[9:i])}
			v, comment, note := ParseValue(card[i+1:])
			c.Value, c.Comment = v, comment
			return c, noteFor(c.Key, note)
		}
	}
	if isCommentary(key) {
		return Card{Key: key, Comment: strings.TrimRight(card[8:], " ")}, ""
	}
	if card[8:10] != "= " {
		// Without the value indicator the card has no value (§4.1.2.2);
		// keep its text as Unparsed so that it is neither read as a value
		// nor written back as one.
		text := strings.TrimSpace(card[8:])
		return Card{Key: key, Value: Unparsed(text)}, noteFor(key, "no value indicator '= ' in columns 9-10 (FITS Standard 4.0 §4.1.2.2); not read as a value")
	}
	c := Card{Key: key}
	v, comment, note := ParseValue(card[10:])
	c.Value, c.Comment = v, comment
	return c, noteFor(key, note)
}

func noteFor(key, note string) string {
	if note == "" {
		return ""
	}
	return "keyword " + key + ": " + note
}

var (
	// intRE is an integer value (FITS Standard 4.0 §4.2.3).
	intRE = regexp.MustCompile(`^[+-]?[0-9]+$`)
	// realRE is a real value with the exponent letters of FITS Standard
	// 4.0 §4.2.4 and Appendix A (upper-case E or D).
	realRE = regexp.MustCompile(`^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([ED][+-]?[0-9]+)?$`)
	// realLowerRE accepts lower-case exponent letters as well.
	realLowerRE = regexp.MustCompile(`^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([EDed][+-]?[0-9]+)?$`)
)

// ParseValue parses the value field of a card (columns 11–80) per FITS
// Standard 4.0 §4.2 and returns the value, the comment (after '/') and a
// note on any departure from the standard:
//
//   - a character string in single quotes, a doubled quote standing for
//     one, trailing blanks removed (§4.2.1.1) → string;
//   - T or F (§4.2.2) → bool;
//   - an integer, optionally signed (§4.2.3) → int, or *big.Int beyond
//     64 bits;
//   - a real with an optional exponent introduced by E or D (§4.2.4,
//     Appendix A) → float64 ("1.5D-3" is 0.0015). A lower-case e or d is
//     not in the standard; it is read as astropy reads it and noted;
//   - a complex pair "(re, im)" of integers or reals (§4.2.5, §4.2.6) →
//     complex128;
//   - an empty field → nil (undefined value, §4.1.2.3);
//   - anything else → Unparsed (with a note).
func ParseValue(field string) (value any, comment, note string) {
	t := strings.TrimLeft(field, " ")
	if strings.HasPrefix(t, "'") {
		s, comment, ok := parseString(field)
		if !ok {
			return Unparsed(strings.TrimSpace(field)), "", "unterminated string value"
		}
		return s, comment, ""
	}
	tok := t
	if i := strings.IndexByte(t, '/'); i >= 0 {
		tok, comment = t[:i], strings.TrimSpace(t[i+1:])
	}
	tok = strings.TrimSpace(tok)
	switch {
	case tok == "":
		return nil, comment, ""
	case tok == "T":
		return true, comment, ""
	case tok == "F":
		return false, comment, ""
	case intRE.MatchString(tok):
		return parseInt(tok), comment, ""
	case realRE.MatchString(tok):
		return parseReal(tok), comment, ""
	case realLowerRE.MatchString(tok):
		v := parseReal(tok)
		return v, comment, fmt.Sprintf("value %s has a lower-case exponent letter, which FITS Standard 4.0 §4.2.4 does not allow; read as %v", tok, v)
	case strings.HasPrefix(tok, "("):
		if z, ok := parseComplex(tok); ok {
			return z, comment, ""
		}
	}
	return Unparsed(tok), comment, fmt.Sprintf("value %q is not a FITS value (FITS Standard 4.0 §4.2)", tok)
}

// parseInt returns the integer tok (already matched by intRE) as int, or
// as *big.Int when it does not fit 64 bits.
func parseInt(tok string) any {
	if n, err := strconv.ParseInt(strings.TrimPrefix(tok, "+"), 10, 64); err == nil {
		return int(n)
	}
	z, _ := new(big.Int).SetString(strings.TrimPrefix(tok, "+"), 10)
	return z
}

// parseReal converts a real matched by realLowerRE to float64; the D
// exponent letter means the same as E (§4.2.4). Values beyond float64's
// range become ±Inf, which Header.Number refuses.
func parseReal(tok string) float64 {
	tok = strings.Map(func(r rune) rune {
		if r == 'D' || r == 'd' || r == 'e' {
			return 'E'
		}
		return r
	}, tok)
	v, err := strconv.ParseFloat(tok, 64)
	if err != nil {
		// Only a range error is possible here; v is ±Inf or 0.
		return v
	}
	return v
}

// parseComplex parses "(re, im)" (§4.2.5–4.2.6).
func parseComplex(tok string) (complex128, bool) {
	if !strings.HasSuffix(tok, ")") {
		return 0, false
	}
	parts := strings.Split(tok[1:len(tok)-1], ",")
	if len(parts) != 2 {
		return 0, false
	}
	var v [2]float64
	for i, p := range parts {
		p = strings.TrimSpace(p)
		if !realLowerRE.MatchString(p) {
			return 0, false
		}
		v[i] = parseReal(p)
	}
	return complex(v[0], v[1]), true
}

// parseString parses a quoted string starting after leading blanks of
// field (FITS Standard 4.0 §4.2.1.1): a doubled quote stands for one,
// trailing blanks are not significant. It returns the string, the comment
// after it (text after '/', trimmed) and false if the closing quote is
// missing.
func parseString(field string) (string, string, bool) {
	v := strings.TrimLeft(field, " ")
	if len(v) == 0 || v[0] != '\'' {
		return "", "", false
	}
	var b strings.Builder
	for i := 1; i < len(v); i++ {
		c := v[i]
		if c != '\'' {
			b.WriteByte(c)
			continue
		}
		if i+1 < len(v) && v[i+1] == '\'' {
			b.WriteByte('\'')
			i++
			continue
		}
		rest := v[i+1:]
		comment := ""
		if j := strings.IndexByte(rest, '/'); j >= 0 {
			comment = strings.TrimSpace(rest[j+1:])
		}
		return strings.TrimRight(b.String(), " "), comment, true
	}
	return "", "", false
}
