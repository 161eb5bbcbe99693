package ingest

// pow10 holds the powers of ten that float64 represents exactly.
var pow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// parseDecimal parses the common shape of a series cell, [+-]digits[.digits]
// [(e|E)[+-]digits], when its value is m * 10^e with an integer m < 2^53
// and |e| <= 22. Both m and 10^|e| are then exact float64 values, so one
// multiplication or division gives the correctly rounded result (Clinger's
// fast path; W. D. Clinger, "How to read floating point numbers
// accurately", PLDI 1990), the same value strconv.ParseFloat returns. Any
// other text reports ok = false and is left to strconv.ParseFloat.
func parseDecimal(b []byte) (v float64, ok bool) {
	i, neg := 0, false
	if i < len(b) && (b[i] == '+' || b[i] == '-') {
		neg = b[i] == '-'
		i++
	}
	var m uint64
	digits, exp := 0, 0
	for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
		if digits > 0 || b[i] != '0' {
			digits++
		}
		m = m*10 + uint64(b[i]-'0')
		if digits > 15 {
			return 0, false
		}
	}
	seen := i > 0 && b[i-1] >= '0' && b[i-1] <= '9'
	if i < len(b) && b[i] == '.' {
		i++
		for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
			if digits > 0 || b[i] != '0' {
				digits++
			}
			m = m*10 + uint64(b[i]-'0')
			exp--
			seen = true
			if digits > 15 {
				return 0, false
			}
		}
	}
	if !seen {
		return 0, false
	}
	if i < len(b) && (b[i] == 'e' || b[i] == 'E') {
		i++
		eneg := false
		if i < len(b) && (b[i] == '+' || b[i] == '-') {
			eneg = b[i] == '-'
			i++
		}
		start, e := i, 0
		for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
			e = e*10 + int(b[i]-'0')
			if e > 1000 {
				return 0, false
			}
		}
		if i == start {
			return 0, false
		}
		if eneg {
			e = -e
		}
		exp += e
	}
	if i != len(b) || exp < -22 || exp > 22 {
		return 0, false
	}
	// At most 15 significant digits: m < 10^15 < 2^53, exact in float64.
	v = float64(m)
	if exp < 0 {
		v /= pow10[-exp]
	} else {
		v *= pow10[exp]
	}
	if neg {
		v = -v
	}
	return v, true
}
