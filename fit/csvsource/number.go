package csvsource

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// missingWords are the cell texts, compared without regard to case, that
// stand for a missing number. The infinities are here too: the engine
// cannot fit them, so they are treated as missing rather than as values.
var missingWords = [...]string{
	"na", "n/a", "nan", "null",
	"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity",
}

// parseNumber reads a numeric cell. It returns NaN for a missing value
// (an empty cell or one of missingWords) and an error, meant to follow
// `file line N, column "x": `, for anything else that is not a plain decimal
// number. It allocates only when it returns an error.
//
// Only plain decimal notation is accepted (digits, sign, '.', exponent):
// strconv.ParseFloat alone would also take Go forms such as "0x1p3" and
// "1_000", which in a data file are more likely mistakes than numbers.
func parseNumber(s string) (float64, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return math.NaN(), nil
	}
	if isDecimal(s) {
		v, err := strconv.ParseFloat(s, 64)
		switch {
		case err == nil:
			return v, nil
		case errors.Is(err, strconv.ErrRange) && math.IsInf(v, 0):
			return 0, fmt.Errorf("%s is too large for a number (the largest is about 1.8e308)", quoteCell(s))
		case errors.Is(err, strconv.ErrRange):
			return v, nil // underflow: v is the nearest float, which is fine
		}
		// Right characters, wrong shape ("1-2", "1e", "..."): fall through.
	} else if isMissingWord(s) {
		return math.NaN(), nil
	}
	return 0, notNumber(s)
}

// isDecimal reports whether s has only the characters a plain decimal
// number may have. It is a filter, not a parser: "1-2" passes.
func isDecimal(s string) bool {
	for i := 0; i < len(s); i++ {
		switch c := s[i]; {
		case '0' <= c && c <= '9', c == '.', c == '-', c == '+', c == 'e', c == 'E':
		default:
			return false
		}
	}
	return true
}

func isMissingWord(s string) bool {
	if len(s) > len("+infinity") {
		return false
	}
	for _, w := range missingWords {
		if strings.EqualFold(s, w) {
			return true
		}
	}
	return false
}

// notNumber explains why s is not a number, with a hint at the likely fix.
func notNumber(s string) error {
	if strings.ContainsRune(s, ',') && looksLikeCommaNumber(s) {
		return fmt.Errorf("%s is not a number: write the decimal point as '.' and leave out thousands separators (1234.5, not 1234,5 or 1,234.5)", quoteCell(s))
	}
	return fmt.Errorf("%s is not a number (leave the cell empty or write NA for a missing value)", quoteCell(s))
}

// looksLikeCommaNumber reports whether s would be a number if its commas
// were decimal commas ("1,5", "1.234,5") or thousands separators
// ("1,234.5").
func looksLikeCommaNumber(s string) bool {
	asDecimal := strings.ReplaceAll(strings.ReplaceAll(s, ".", ""), ",", ".")
	asThousands := strings.ReplaceAll(s, ",", "")
	for _, t := range []string{asDecimal, asThousands} {
		if !isDecimal(t) {
			continue
		}
		if _, err := strconv.ParseFloat(t, 64); err == nil {
			return true
		}
	}
	return false
}
