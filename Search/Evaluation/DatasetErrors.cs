namespace Bitbudget.Search.Evaluation;

/// <summary>Stable codes and throw helpers for dataset problems, so readers stay small.</summary>
internal static class DatasetErrors
{
    /// <summary>The file cannot be read as a dataset, or contradicts itself.</summary>
    public const string InvalidCode = "dataset-invalid";

    /// <summary>The file exceeds a <see cref="DatasetLimits"/> cap.</summary>
    public const string TooLargeCode = "dataset-too-large";

    /// <summary>An .npz member has a name no dataset of ours would carry (a path, a traversal).</summary>
    public const string BadMemberNameCode = "dataset-bad-member-name";

    /// <summary>The dataset does not fit the model's inputs.</summary>
    public const string MismatchCode = "dataset-mismatch";

    /// <summary>A label is not a class of the output accuracy is judged on.</summary>
    public const string LabelsOutOfRangeCode = "dataset-labels-out-of-range";

    /// <summary>A calibration array holds NaN or infinity.</summary>
    public const string NonFiniteCode = "dataset-non-finite";

    public static EngineException Invalid(string message, Exception? inner = null) => new(InvalidCode, message, inner);

    public static EngineException TooLarge(string message) => new(TooLargeCode, message);

    public static EngineException Mismatch(string message) => new(MismatchCode, message);

    public static EngineException BadMemberName(string message) => new(BadMemberNameCode, message);

    public static EngineException NonFinite(string message) => new(NonFiniteCode, message);

    public static string FormatShape(IReadOnlyList<long> shape) => "[" + string.Join(", ", shape) + "]";

    public static string FormatShape(IReadOnlyList<long?> shape) =>
        "[" + string.Join(",", shape.Select(d => d is long v && v >= 0 ? v.ToString(System.Globalization.CultureInfo.InvariantCulture) : "?")) + "]";

    public static string TypeName(ElementType type) => type switch
    {
        ElementType.Float32 => "float32",
        ElementType.Float16 => "float16",
        ElementType.Float64 => "float64",
        ElementType.Int64 => "int64",
        ElementType.Int32 => "int32",
        ElementType.Int8 => "int8",
        ElementType.UInt8 => "uint8",
        ElementType.Bool => "bool",
        _ => "an unsupported element type",
    };

    /// <summary>A size a user can read at a glance, with the exact count for comparing against limits.</summary>
    public static string FormatBytes(long bytes) => bytes switch
    {
        >= 1L << 30 => $"{bytes / (double)(1L << 30):0.##} GiB ({bytes} bytes)",
        >= 1L << 20 => $"{bytes / (double)(1L << 20):0.##} MiB ({bytes} bytes)",
        >= 1L << 10 => $"{bytes / (double)(1L << 10):0.##} KiB ({bytes} bytes)",
        _ => $"{bytes} bytes",
    };
}
