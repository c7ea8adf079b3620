using System.Globalization;
using System.Text;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// The parsed header of a .npy array: element type, byte order, memory order and shape. The header is a
/// Python dict literal (NumPy format 1.0/2.0 in Latin-1, 3.0 in UTF-8), so this reads just enough
/// Python literal syntax for it: strings, True/False, integer tuples, and lists (which mark structured
/// dtypes we refuse).
/// </summary>
internal sealed record NpyHeader(ElementType ElementType, int ItemSize, bool BigEndian, bool FortranOrder, long[] Shape)
{
    public static NpyHeader Parse(string text, string arrayName)
    {
        var parser = new LiteralParser(text, arrayName);
        var dict = parser.ParseDict();
        if (!dict.TryGetValue("descr", out var descrValue))
            throw Bad(arrayName, "its header has no 'descr' entry");
        if (!dict.TryGetValue("fortran_order", out var fortranValue) || fortranValue is not bool fortran)
            throw Bad(arrayName, "its header has no True/False 'fortran_order' entry");
        if (!dict.TryGetValue("shape", out var shapeValue) || shapeValue is not List<long> shapeList)
            throw Bad(arrayName, "its header has no integer tuple 'shape' entry");
        if (descrValue is not string descr)
            throw DatasetErrors.Invalid(
                $"Array '{arrayName}' has a structured (record) dtype; only plain numeric arrays are read. Save each field as its own array.");
        foreach (var d in shapeList)
            if (d < 0) throw Bad(arrayName, $"its shape {DatasetErrors.FormatShape(shapeList)} has a negative dimension");
        var (type, size, bigEndian) = ParseDescr(descr, arrayName);
        return new NpyHeader(type, size, bigEndian, fortran, shapeList.ToArray());
    }

    /// <summary>Maps a NumPy type string such as '&lt;f4' or '|b1' to an element type.</summary>
    private static (ElementType Type, int Size, bool BigEndian) ParseDescr(string descr, string arrayName)
    {
        if (descr.Length < 2)
            throw Bad(arrayName, $"its dtype '{descr}' is not a NumPy type string");
        var order = descr[0];
        var code = descr[1..];
        bool bigEndian = order switch
        {
            '<' or '|' => false,
            '>' => true,
            '=' => !BitConverter.IsLittleEndian,
            _ => throw Bad(arrayName, $"its dtype '{descr}' has no byte-order mark"),
        };
        (ElementType type, int size) = code switch
        {
            "f4" => (ElementType.Float32, 4),
            "f2" => (ElementType.Float16, 2),
            "f8" => (ElementType.Float64, 8),
            "i8" => (ElementType.Int64, 8),
            "i4" => (ElementType.Int32, 4),
            "i1" => (ElementType.Int8, 1),
            "u1" => (ElementType.UInt8, 1),
            "b1" => (ElementType.Bool, 1),
            _ => (ElementType.Unsupported, 0),
        };
        if (type == ElementType.Unsupported)
        {
            var what = code.Length > 0 ? code[0] switch
            {
                'O' => "object (pickled Python objects, which are never unpickled here)",
                'c' => "complex",
                'U' or 'S' or 'a' => "text",
                'V' => "raw bytes (void)",
                'M' or 'm' => "date/time",
                _ => null,
            } : null;
            throw DatasetErrors.Invalid(
                $"Array '{arrayName}' has dtype '{descr}'{(what is null ? "" : $" ({what})")}, which is not supported; " +
                "use float32, float16, float64, int64, int32, int8, uint8 or bool.");
        }
        return (type, size, bigEndian && size > 1);
    }

    private static EngineException Bad(string arrayName, string what) =>
        DatasetErrors.Invalid($"Array '{arrayName}' is not a readable .npy array: {what}.");

    /// <summary>Just enough of Python's literal grammar for a .npy header dict.</summary>
    private sealed class LiteralParser(string text, string arrayName)
    {
        private int _pos;

        public Dictionary<string, object> ParseDict()
        {
            SkipSpace();
            Expect('{');
            var result = new Dictionary<string, object>(StringComparer.Ordinal);
            while (true)
            {
                SkipSpace();
                if (TryTake('}')) break;
                var key = ParseValue() as string ?? throw Bad(arrayName, "its header dict has a key that is not a string");
                SkipSpace();
                Expect(':');
                result[key] = ParseValue();
                SkipSpace();
                if (TryTake(',')) continue;
                SkipSpace();
                Expect('}');
                break;
            }
            return result;
        }

        private object ParseValue()
        {
            SkipSpace();
            if (_pos >= text.Length) throw Bad(arrayName, "its header ends early");
            char c = text[_pos];
            if (c is '\'' or '"') return ParseString();
            if (c == '(') return ParseSequence(')');
            if (c == '[') return ParseSequence(']');
            if (char.IsAsciiDigit(c) || c == '-') return ParseInteger();
            if (Match("True")) return true;
            if (Match("False")) return false;
            if (Match("None")) return "None";
            throw Bad(arrayName, $"its header has an unexpected '{c}' at offset {_pos}");
        }

        private static List<long>? AsIntegers(List<object> items)
        {
            var result = new List<long>(items.Count);
            foreach (var item in items)
            {
                if (item is not long v) return null;
                result.Add(v);
            }
            return result;
        }

        /// <summary>
        /// A tuple of integers becomes List&lt;long&gt; (a shape); anything else, such as the list of a
        /// structured dtype, becomes List&lt;object&gt;.
        /// </summary>
        private object ParseSequence(char close)
        {
            _pos++;
            var items = new List<object>();
            while (true)
            {
                SkipSpace();
                if (TryTake(close)) break;
                items.Add(ParseValue());
                SkipSpace();
                if (TryTake(',')) continue;
                SkipSpace();
                Expect(close);
                break;
            }
            if (close == ')' && AsIntegers(items) is { } ints) return ints;
            return items;
        }

        private long ParseInteger()
        {
            int start = _pos;
            if (text[_pos] == '-') _pos++;
            while (_pos < text.Length && char.IsAsciiDigit(text[_pos])) _pos++;
            if (!long.TryParse(text.AsSpan(start, _pos - start), NumberStyles.AllowLeadingSign, CultureInfo.InvariantCulture, out var value))
                throw Bad(arrayName, $"its header holds a number that is not a 64-bit integer at offset {start}");
            // Files written under Python 2 spell long integers with a trailing L, e.g. (3L, 4L).
            if (_pos < text.Length && text[_pos] is 'L' or 'l') _pos++;
            return value;
        }

        private string ParseString()
        {
            char quote = text[_pos++];
            var sb = new StringBuilder();
            while (_pos < text.Length && text[_pos] != quote)
            {
                if (text[_pos] == '\\' && _pos + 1 < text.Length) _pos++;
                sb.Append(text[_pos++]);
            }
            if (_pos >= text.Length) throw Bad(arrayName, "its header has an unterminated string");
            _pos++;
            return sb.ToString();
        }

        private bool Match(string word)
        {
            if (string.CompareOrdinal(text, _pos, word, 0, word.Length) != 0) return false;
            _pos += word.Length;
            return true;
        }

        private void SkipSpace()
        {
            while (_pos < text.Length && char.IsWhiteSpace(text[_pos])) _pos++;
        }

        private bool TryTake(char c)
        {
            if (_pos < text.Length && text[_pos] == c)
            {
                _pos++;
                return true;
            }
            return false;
        }

        private void Expect(char c)
        {
            if (!TryTake(c))
                throw Bad(arrayName, _pos < text.Length
                    ? $"its header has '{text[_pos]}' at offset {_pos} where '{c}' belongs"
                    : $"its header ends where '{c}' belongs");
        }
    }
}
