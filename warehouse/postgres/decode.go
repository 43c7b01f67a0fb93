package postgres

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strconv"
	"unsafe"

	"counterpart/warehouse/sqlcore"
)

// kind is the wire encoding of a column's values.
type kind int

const (
	kInt2    kind = iota // binary, 2 bytes big-endian
	kInt4                // binary, 4 bytes
	kInt8                // binary, 8 bytes
	kFloat4              // binary IEEE 754 single
	kFloat8              // binary IEEE 754 double
	kNumeric             // text: the decimal digits
	kBool                // binary, 1 byte
	kText                // binary = the UTF-8 bytes
	kEnum                // text = the label
	kDate                // binary, int32 days since 2000-01-01
	kOther               // text, never decoded
)

// Format codes of the extended query protocol.
const (
	textFormat   int16 = 0
	binaryFormat int16 = 1
)

// format is the result format the engine asks for: binary where decoding
// it is a few byte reads, text for numeric (its binary form is base-10000
// digits; the text parses straight to the nearest double) and for types
// whose binary form is not decoded.
func (k kind) format() int16 {
	switch k {
	case kNumeric, kEnum, kOther:
		return textFormat
	}
	return binaryFormat
}

// builtin maps the OIDs of built-in types (pg_type.dat; stable across
// releases) to their class and wire kind.
var builtin = map[uint32]pgType{
	16:   {"boolean", sqlcore.ClassBool, kBool},
	20:   {"bigint", sqlcore.ClassInt, kInt8},
	21:   {"smallint", sqlcore.ClassInt, kInt2},
	23:   {"integer", sqlcore.ClassInt, kInt4},
	700:  {"real", sqlcore.ClassFloat, kFloat4},
	701:  {"double precision", sqlcore.ClassFloat, kFloat8},
	1700: {"numeric", sqlcore.ClassDecimal, kNumeric},
	25:   {"text", sqlcore.ClassText, kText},
	1043: {"character varying", sqlcore.ClassText, kText},
	1042: {"character", sqlcore.ClassText, kText},
	19:   {"name", sqlcore.ClassText, kText},
	705:  {"unknown", sqlcore.ClassText, kText},
	1082: {"date", sqlcore.ClassDate, kDate},
}

// Days from 1970-01-01 to 2000-01-01, the epoch of Postgres dates.
const pgEpochDays = 10957

// intVal reads a binary integer.
func intVal(k kind, b []byte) (int64, error) {
	switch {
	case k == kInt8 && len(b) == 8:
		return int64(binary.BigEndian.Uint64(b)), nil
	case k == kInt4 && len(b) == 4:
		return int64(int32(binary.BigEndian.Uint32(b))), nil
	case k == kInt2 && len(b) == 2:
		return int64(int16(binary.BigEndian.Uint16(b))), nil
	}
	return 0, fmt.Errorf("unexpected %d-byte integer value", len(b))
}

// floatVal converts a numeric, boolean or date wire value to float64. A
// date becomes days since 1970-01-01, ±infinity an infinite value.
func floatVal(k kind, b []byte) (float64, error) {
	switch k {
	case kInt2, kInt4, kInt8:
		x, err := intVal(k, b)
		return float64(x), err
	case kFloat8:
		if len(b) == 8 {
			return math.Float64frombits(binary.BigEndian.Uint64(b)), nil
		}
	case kFloat4:
		if len(b) == 4 {
			return float64(math.Float32frombits(binary.BigEndian.Uint32(b))), nil
		}
	case kNumeric:
		return numericVal(b)
	case kBool:
		if len(b) == 1 {
			if b[0] != 0 {
				return 1, nil
			}
			return 0, nil
		}
	case kDate:
		if len(b) == 4 {
			switch d := int32(binary.BigEndian.Uint32(b)); d {
			case math.MaxInt32:
				return math.Inf(1), nil
			case math.MinInt32:
				return math.Inf(-1), nil
			default:
				return float64(int64(d) + pgEpochDays), nil
			}
		}
	}
	return 0, fmt.Errorf("unexpected %d-byte value for a number", len(b))
}

// numericVal parses numeric's text form ("-12.50", "NaN", "Infinity") to
// the nearest float64 (strconv.ParseFloat rounds correctly); a value
// beyond the double range becomes ±Inf and is refused later as
// non-finite.
func numericVal(b []byte) (float64, error) {
	f, err := strconv.ParseFloat(bytesString(b), 64)
	if err != nil && !errors.Is(err, strconv.ErrRange) {
		return 0, fmt.Errorf("numeric value %q: %w", b, err)
	}
	return f, nil
}

// bytesString views b as a string without copying, for parsing and map
// look-ups; the result must not outlive b.
func bytesString(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	return unsafe.String(&b[0], len(b))
}

// feed hands one wire value to a sink; nil b is NULL.
func feed(s sqlcore.Sink, k kind, b []byte) error {
	if b == nil {
		s.Null()
		return nil
	}
	switch k {
	case kText, kEnum, kOther:
		s.Text(bytesString(b))
	case kNumeric:
		f, err := numericVal(b)
		if err != nil {
			return err
		}
		s.Exact(f, bytesString(b), false)
	case kBool:
		if len(b) != 1 {
			return fmt.Errorf("unexpected %d-byte boolean", len(b))
		}
		s.Bool(b[0] != 0)
	case kInt2, kInt4, kInt8:
		x, err := intVal(k, b)
		if err != nil {
			return err
		}
		s.Int(x)
	default:
		f, err := floatVal(k, b)
		if err != nil {
			return err
		}
		if k == kDate {
			s.Date(f)
		} else {
			s.Float(f)
		}
	}
	return nil
}
