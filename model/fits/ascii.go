package fits

import (
	"fmt"
	"strings"
)

// ASCII returns s with only the characters FITS headers allow (printable
// ASCII 32–126, FITS Standard 4.0 §4.1.2.3; the writer applies it to every
// card's value and comment). Other characters are transliterated (common
// practice, the table below): '×' as "x", '–' and '−' as "-", 'µ' as "u",
// '²' as "2", accented Latin letters without their accent, Greek letters
// by name; control characters become a blank, and a character the table
// lacks is spelled as its code point, "U+2603". No character becomes '?'.
func ASCII(s string) string {
	ok := true
	for i := 0; i < len(s); i++ {
		if s[i] < 32 || s[i] > 126 {
			ok = false
			break
		}
	}
	if ok {
		return s
	}
	var b strings.Builder
	for _, r := range s {
		switch t, known := asciiFor[r]; {
		case r >= 32 && r <= 126:
			b.WriteRune(r)
		case known:
			b.WriteString(t)
		case r < 32 || r == 127 || (r >= 0x80 && r < 0xa0):
			b.WriteByte(' ')
		default:
			fmt.Fprintf(&b, "U+%04X", r)
		}
	}
	return b.String()
}

// asciiFor is the transliteration table of ASCII (common practice).
var asciiFor = func() map[rune]string {
	m := map[rune]string{
		// typography and mathematics
		'×': "x", '÷': "/", '·': "*", '•': "*", '−': "-", '‐': "-", '‑': "-", '‒': "-",
		'–': "-", '—': "-", '‘': "'", '’': "'", '‚': ",", '“': "\"", '”': "\"", '„': "\"",
		'′': "'", '″': "\"", '…': "...", '≤': "<=", '≥': ">=", '≠': "!=", '≈': "~",
		'∼': "~", '±': "+/-", '∓': "-/+", '∞': "inf", '→': "->", '←': "<-", '↔': "<->",
		'√': "sqrt", '∑': "sum", '∆': "Delta", '∂': "d", '∫': "int", '‰': "permil",
		'°': "deg", '℃': "degC", '\u212b': "A", // the angstrom sign '€': "EUR", '£': "GBP", '¥': "JPY",
		'©': "(c)", '®': "(R)", '™': "(TM)", '§': "S", '¶': "P", '¬': "not", '¦': "|",
		'«': "<<", '»': ">>", '‹': "<", '›': ">", '¡': "!", '¢': "c", '¤': "", '¨': "\"",
		'´': "'", '¯': "-", '¸': ",", 'ª': "a", 'º': "o", '¼': "1/4", '½': "1/2", '¾': "3/4",
		'⁰': "0", '¹': "1", '²': "2", '³': "3", '⁴': "4", '⁵': "5", '⁶': "6", '⁷': "7",
		'⁸': "8", '⁹': "9", '⁻': "-", '⁺': "+", '₀': "0", '₁': "1", '₂': "2", '₃': "3",
		'µ': "u", 'μ': "u", // the micro prefix, as in "µm"
		// spaces
		'\u00a0': " ", '\u2002': " ", '\u2003': " ", '\u2009': " ", '\u200a': " ",
		'\u202f': " ", '\u200b': "", '\ufeff': "",
		// Latin letters
		'Æ': "AE", 'æ': "ae", 'Ø': "O", 'ø': "o", 'Œ': "OE", 'œ': "oe", 'ß': "ss",
		'Ð': "D", 'ð': "d", 'Þ': "Th", 'þ': "th", 'Ł': "L", 'ł': "l", 'Đ': "D", 'đ': "d",
		'ı': "i",
	}
	// Accented Latin letters: the base letter (Latin-1 Supplement and
	// Latin Extended-A, letters in code-point order).
	for base, letters := range map[string]string{
		"A": "ÀÁÂÃÄÅĀĂĄ", "a": "àáâãäåāăą", "C": "ÇĆĈĊČ", "c": "çćĉċč", "D": "Ď", "d": "ď",
		"E": "ÈÉÊËĒĔĖĘĚ", "e": "èéêëēĕėęě", "G": "ĜĞĠĢ", "g": "ĝğġģ", "H": "ĤĦ", "h": "ĥħ",
		"I": "ÌÍÎÏĨĪĬĮİ", "i": "ìíîïĩīĭį", "J": "Ĵ", "j": "ĵ", "K": "Ķ", "k": "ķ",
		"L": "ĹĻĽĿ", "l": "ĺļľŀ", "N": "ÑŃŅŇ", "n": "ñńņň", "O": "ÒÓÔÕÖŌŎŐ", "o": "òóôõöōŏő",
		"R": "ŔŖŘ", "r": "ŕŗř", "S": "ŚŜŞŠ", "s": "śŝşš", "T": "ŢŤŦ", "t": "ţťŧ",
		"U": "ÙÚÛÜŨŪŬŮŰŲ", "u": "ùúûüũūŭůűų", "W": "Ŵ", "w": "ŵ", "Y": "ÝŶŸ", "y": "ýÿŷ",
		"Z": "ŹŻŽ", "z": "źżž",
	} {
		for _, r := range letters {
			m[r] = base
		}
	}
	// Greek letters by name (U+0391–U+03A9, U+03B1–U+03C9; μ stays "u").
	names := []string{"alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta",
		"iota", "kappa", "lambda", "mu", "nu", "xi", "omicron", "pi", "rho", "sigma", "sigma",
		"tau", "upsilon", "phi", "chi", "psi", "omega"}
	for i, n := range names {
		if lower := rune(0x3b1 + i); m[lower] == "" {
			m[lower] = n
		}
		if i != 17 { // U+03A2 is unassigned (the final sigma has no capital)
			m[rune(0x391+i)] = strings.ToUpper(n[:1]) + n[1:]
		}
	}
	return m
}()
