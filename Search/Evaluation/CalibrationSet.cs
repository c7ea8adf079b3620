using System.Numerics.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// A dataset checked against a model's inputs: one array per input, in the model's input order, the
/// first axis of each being the sample axis, plus optional class labels.
/// </summary>
/// <remarks>
/// Mapping rules. Arrays map to inputs by name. An array named <c>labels</c> holds one integer class
/// per sample, unless the model has an input of that name. An array named
/// <see cref="DatasetReader.SingleArrayName"/> (what a single .npy becomes) feeds the model's only input
/// when the model has exactly one input and it carries another name. Any other array is refused, so a
/// typo in a name cannot silently drop data. The first axis is always the sample axis; when the model
/// fixes it at k, the runner feeds k samples per run (<see cref="SamplesPerRun"/>) and the sample count
/// must be a multiple of k. Float16 and float64 arrays are converted for float32 inputs; every other
/// element type must match exactly.
/// Codes: <c>dataset-mismatch</c> when the dataset does not fit the model (missing or unknown array,
/// element type, rank, fixed dimension); <c>dataset-invalid</c> when it contradicts itself (sample
/// counts, labels, no samples); <c>dataset-non-finite</c> for NaN or infinity in an input.
/// </remarks>
public sealed class CalibrationSet
{
    /// <summary>Name of the optional array of class labels.</summary>
    public const string LabelsName = "labels";

    private CalibrationSet(IReadOnlyList<NpyArray> inputs, IReadOnlyList<long>? labels, int sampleCount, int? samplesPerRun)
    {
        Inputs = inputs;
        Labels = labels;
        SampleCount = sampleCount;
        SamplesPerRun = samplesPerRun;
    }

    /// <summary>Number of samples (length of every input's first axis).</summary>
    public int SampleCount { get; }

    /// <summary>One class label per sample, or null when the dataset has no <c>labels</c> array.</summary>
    public IReadOnlyList<long>? Labels { get; }

    /// <summary>One array per model input, in the model's input order, named after the input.</summary>
    public IReadOnlyList<NpyArray> Inputs { get; }

    /// <summary>
    /// Samples the model takes per run when it fixes its first dimension (the same for every input);
    /// null when the first dimension is dynamic and any batch size works.
    /// </summary>
    public int? SamplesPerRun { get; }

    /// <summary>Checks <paramref name="arrays"/> against <paramref name="modelInputs"/> and builds the set.</summary>
    public static CalibrationSet Create(IReadOnlyList<NpyArray> arrays, IReadOnlyList<ValueDescription> modelInputs)
    {
        ArgumentNullException.ThrowIfNull(arrays);
        ArgumentNullException.ThrowIfNull(modelInputs);
        if (modelInputs.Count == 0)
            throw DatasetErrors.Mismatch("The model has no inputs, so no dataset can feed it.");

        var byName = new Dictionary<string, NpyArray>(StringComparer.Ordinal);
        foreach (var array in arrays)
            if (!byName.TryAdd(array.Name, array))
                throw DatasetErrors.Invalid($"The dataset holds two arrays named '{array.Name}'.");

        var inputNames = modelInputs.Select(i => i.Name).ToHashSet(StringComparer.Ordinal);
        var used = new HashSet<string>(StringComparer.Ordinal);
        var matched = new List<(ValueDescription Input, NpyArray Array)>(modelInputs.Count);
        foreach (var input in modelInputs)
        {
            if (!byName.TryGetValue(input.Name, out var array)
                && !(modelInputs.Count == 1 && byName.TryGetValue(DatasetReader.SingleArrayName, out array)))
            {
                var present = arrays.Count == 0 ? "nothing" : string.Join(", ", arrays.Select(a => a.Name));
                throw DatasetErrors.Mismatch(
                    $"The dataset has no array '{input.Name}' for model input '{input.Name}' " +
                    $"({DatasetErrors.TypeName(input.ElementType)}, {DatasetErrors.FormatShape(input.Shape)}); it has: {present}.");
            }
            used.Add(array.Name);
            matched.Add((input, array));
        }

        NpyArray? labelsArray = null;
        if (!inputNames.Contains(LabelsName) && byName.TryGetValue(LabelsName, out var l))
        {
            labelsArray = l;
            used.Add(LabelsName);
        }
        var unknown = arrays.Where(a => !used.Contains(a.Name)).Select(a => $"'{a.Name}'").ToList();
        if (unknown.Count > 0)
            throw DatasetErrors.Mismatch(
                $"The dataset holds {(unknown.Count == 1 ? "an array" : "arrays")} the model has no input for: {string.Join(", ", unknown)}. " +
                $"The model's inputs are: {string.Join(", ", modelInputs.Select(i => i.Name))} (plus an optional '{LabelsName}'). Rename or remove {(unknown.Count == 1 ? "it" : "them")}.");

        int? samplesPerRun = null;
        var inputs = new List<NpyArray>(matched.Count);
        foreach (var (input, array) in matched)
        {
            CheckShape(input, array);
            if (input.Shape[0] is long fixedFirst and > 0)
            {
                if (samplesPerRun is int other && other != fixedFirst)
                    throw DatasetErrors.Mismatch(
                        $"The model fixes its inputs' first (sample) axis at different sizes ({other} and {fixedFirst} for '{input.Name}'); they cannot be fed from one sample axis.");
                samplesPerRun = checked((int)fixedFirst);
            }
            inputs.Add(ConvertAndCheckFinite(input, array));
        }

        long samples = inputs[0].SampleCount;
        foreach (var array in inputs)
            if (array.SampleCount != samples)
                throw DatasetErrors.Invalid(
                    $"The arrays disagree on the number of samples (their first axis): " +
                    string.Join(", ", inputs.Select(a => $"'{a.Name}' has {a.SampleCount}")) + ".");
        if (samples == 0)
            throw DatasetErrors.Invalid($"The dataset holds no samples: array '{inputs[0].Name}' has 0 along its first axis.");
        if (samples > int.MaxValue)
            throw DatasetErrors.TooLarge($"The dataset holds {samples} samples; at most {int.MaxValue} are used.");
        if (samplesPerRun is int k && samples % k != 0)
            throw DatasetErrors.Mismatch(
                $"The model takes exactly {k} samples per run (its first axis is fixed), but the dataset holds {samples}, not a multiple of {k}.");

        var labels = labelsArray is null ? null : ReadLabels(labelsArray, samples);
        return new CalibrationSet(inputs, labels, (int)samples, samplesPerRun);
    }

    /// <summary>Each input's samples [<paramref name="start"/>, start + count), as new arrays.</summary>
    public IReadOnlyList<NpyArray> Slice(int start, int count)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(start);
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(start + (long)count, SampleCount, nameof(count));
        var result = new NpyArray[Inputs.Count];
        for (int i = 0; i < Inputs.Count; i++)
        {
            var input = Inputs[i];
            long perSample = input.Shape.Skip(1).Aggregate(1L, (a, d) => a * d);
            var data = Array.CreateInstance(input.Data.GetType().GetElementType()!, count * perSample);
            Array.Copy(input.Data, start * perSample, data, 0, count * perSample);
            var shape = input.Shape.ToArray();
            shape[0] = count;
            result[i] = input with { Shape = shape, Data = data };
        }
        return result;
    }

    private static void CheckShape(ValueDescription input, NpyArray array)
    {
        string Describe() =>
            $"array '{array.Name}' has shape {DatasetErrors.FormatShape(array.Shape)} but model input '{input.Name}' takes {DatasetErrors.FormatShape(input.Shape)}";
        if (input.Shape.Count == 0)
            throw DatasetErrors.Mismatch(
                $"Model input '{input.Name}' is a scalar (rank 0), so it has no first axis to hold samples; a dataset cannot feed it.");
        if (array.Shape.Count != input.Shape.Count)
            throw DatasetErrors.Mismatch(
                $"The {Describe()}: rank {array.Shape.Count} where the model needs rank {input.Shape.Count} (the first axis holds the samples).");
        for (int axis = 1; axis < input.Shape.Count; axis++)
            if (input.Shape[axis] is long need and >= 0 && array.Shape[axis] != need)
                throw DatasetErrors.Mismatch($"The {Describe()}: axis {axis} is {array.Shape[axis]}, the model needs {need}.");

        bool convertible = input.ElementType == ElementType.Float32 && array.ElementType is ElementType.Float16 or ElementType.Float64;
        if (input.ElementType == ElementType.Unsupported)
            throw DatasetErrors.Mismatch($"Model input '{input.Name}' has an element type the engine does not handle, so no dataset can feed it.");
        if (array.ElementType != input.ElementType && !convertible)
            throw DatasetErrors.Mismatch(
                $"Array '{array.Name}' holds {DatasetErrors.TypeName(array.ElementType)} but model input '{input.Name}' takes {DatasetErrors.TypeName(input.ElementType)}" +
                (input.ElementType == ElementType.Float32 ? " (float16 and float64 are converted; other types are not)." : "; save the array with that dtype."));
    }

    private static NpyArray ConvertAndCheckFinite(ValueDescription input, NpyArray array)
    {
        var named = array with { Name = input.Name };
        switch (array.Data)
        {
            case float[] f:
                CheckFinite<float>(f, array, null);
                return named;
            case Half[] h when input.ElementType == ElementType.Float16:
                CheckFinite<Half>(h, array, null);
                return named;
            case double[] d when input.ElementType == ElementType.Float64:
                CheckFinite<double>(d, array, null);
                return named;
            case Half[] h:
                CheckFinite<Half>(h, array, null);
                var fromHalf = new float[h.Length];
                TensorPrimitives.ConvertToSingle(h, fromHalf);
                return named with { ElementType = ElementType.Float32, Data = fromHalf };
            case double[] d:
                CheckFinite<double>(d, array, null);
                var fromDouble = new float[d.Length];
                TensorPrimitives.ConvertTruncating<double, float>(d, fromDouble);
                CheckFinite<float>(fromDouble, array, "is too large for float32");
                return named with { ElementType = ElementType.Float32, Data = fromDouble };
            default:
                return named;
        }
    }

    /// <summary>Throws <c>dataset-non-finite</c> naming the first NaN or infinity and its index.</summary>
    private static void CheckFinite<T>(T[] data, NpyArray array, string? overflowWhat)
        where T : System.Numerics.IFloatingPointIeee754<T>
    {
        // IsFiniteAll answers false for an empty span, hence the length test.
        if (data.Length == 0 || TensorPrimitives.IsFiniteAll<T>(data)) return;
        int at = Array.FindIndex(data, v => !T.IsFinite(v));
        if (at < 0) return;
        var value = data[at];
        string index = FormatIndex(at, array.Shape);
        string what = overflowWhat is not null
            ? $"a value at index {index} that {overflowWhat}"
            : T.IsNaN(value) ? $"NaN at index {index}" : T.IsNegative(value) ? $"-infinity at index {index}" : $"+infinity at index {index}";
        throw DatasetErrors.NonFinite($"Array '{array.Name}' holds {what}; calibration data must be finite.");
    }

    private static string FormatIndex(long flat, IReadOnlyList<long> shape)
    {
        var index = new long[shape.Count];
        for (int k = shape.Count - 1; k >= 0; k--)
        {
            index[k] = flat % shape[k];
            flat /= shape[k];
        }
        return DatasetErrors.FormatShape(index);
    }

    private static long[] ReadLabels(NpyArray array, long samples)
    {
        if (array.Shape.Count != 1)
            throw DatasetErrors.Invalid(
                $"Array '{LabelsName}' must be 1-D (one class per sample) but has shape {DatasetErrors.FormatShape(array.Shape)}.");
        if (array.Shape[0] != samples)
            throw DatasetErrors.Invalid($"Array '{LabelsName}' holds {array.Shape[0]} labels for {samples} samples; it needs one per sample.");
        // Switch on the element type, not the array's runtime type: the CLR lets a byte[] pass as sbyte[].
        long[] labels = array.ElementType switch
        {
            ElementType.Int64 => (long[])((long[])array.Data).Clone(),
            ElementType.Int32 => Array.ConvertAll((int[])array.Data, v => (long)v),
            ElementType.Int8 => Array.ConvertAll((sbyte[])array.Data, v => (long)v),
            ElementType.UInt8 => Array.ConvertAll((byte[])array.Data, v => (long)v),
            _ => throw DatasetErrors.Invalid(
                $"Array '{LabelsName}' holds {DatasetErrors.TypeName(array.ElementType)}; labels are integer class indices (int64, int32, int8 or uint8)."),
        };
        int negative = Array.FindIndex(labels, v => v < 0);
        if (negative >= 0)
            throw DatasetErrors.Invalid($"Array '{LabelsName}' holds {labels[negative]} at index {negative}; labels are class indices, 0 or more.");
        return labels;
    }
}
