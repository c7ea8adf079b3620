using System.Numerics.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// A dataset checked against a model's inputs: one array per input, in the model's input order, each
/// either sampled along its own sample axis or a constant fed unchanged to every run, plus optional
/// class labels.
/// </summary>
/// <remarks>
/// Mapping rules. Arrays map to inputs by name. An array named <c>labels</c> holds one integer class
/// per sample, unless the model has an input of that name. An array named
/// <see cref="DatasetReader.SingleArrayName"/> (what a single .npy becomes) feeds the model's only input
/// when the model has exactly one input and it carries another name. Any other array is refused, so a
/// typo in a name cannot silently drop data.
/// Sample axes. An input's sample axis is the one given for it (<c>sampleAxes</c>); otherwise the one
/// dynamic axis of its declared shape when there is exactly one (a state input <c>[2, batch, 128]</c>
/// takes axis 1); otherwise axis 0. When the model fixes a sample axis at k, the runner feeds k samples
/// per run (<see cref="SamplesPerRun"/>) and the sample count must be a multiple of k.
/// Constants. An array whose shape equals its input's whole declared shape, every axis fixed (a 0-d
/// array for a scalar input), is a constant fed unchanged to every run, as long as some other input
/// carries samples and no sample axis was given for it. A scalar input can only take a constant.
/// Float16 and float64 arrays are converted for float32 inputs; every other element type must match exactly.
/// Codes: <c>dataset-mismatch</c> when the dataset does not fit the model (missing or unknown array,
/// element type, rank, fixed dimension, sample axis); <c>dataset-invalid</c> when it contradicts itself
/// (sample counts, labels, no samples); <c>dataset-non-finite</c> for NaN or infinity in an input.
/// </remarks>
public sealed class CalibrationSet
{
    /// <summary>Name of the optional array of class labels.</summary>
    public const string LabelsName = "labels";

    private CalibrationSet(IReadOnlyList<NpyArray> inputs, IReadOnlyList<int?> sampleAxes, IReadOnlyList<long>? labels, int sampleCount, int? samplesPerRun)
    {
        Inputs = inputs;
        SampleAxes = sampleAxes;
        Labels = labels;
        SampleCount = sampleCount;
        SamplesPerRun = samplesPerRun;
    }

    /// <summary>Number of samples (length of every sampled input's sample axis).</summary>
    public int SampleCount { get; }

    /// <summary>One class label per sample, or null when the dataset has no <c>labels</c> array.</summary>
    public IReadOnlyList<long>? Labels { get; }

    /// <summary>One array per model input, in the model's input order, named after the input.</summary>
    public IReadOnlyList<NpyArray> Inputs { get; }

    /// <summary>Per input (same order as <see cref="Inputs"/>): the axis that holds samples, or null for a constant.</summary>
    public IReadOnlyList<int?> SampleAxes { get; }

    /// <summary>
    /// Samples the model takes per run when it fixes its inputs' sample axis (the same for every sampled
    /// input); null when the sample axes are dynamic and any batch size works.
    /// </summary>
    public int? SamplesPerRun { get; }

    /// <summary>Checks <paramref name="arrays"/> against <paramref name="modelInputs"/> and builds the set.</summary>
    /// <param name="sampleAxes">Sample axes given outright, by input name; inputs not named follow the rule in the remarks.</param>
    public static CalibrationSet Create(IReadOnlyList<NpyArray> arrays, IReadOnlyList<ValueDescription> modelInputs, IReadOnlyDictionary<string, int>? sampleAxes = null)
    {
        ArgumentNullException.ThrowIfNull(arrays);
        ArgumentNullException.ThrowIfNull(modelInputs);
        if (modelInputs.Count == 0)
            throw DatasetErrors.Mismatch("The model has no inputs, so no dataset can feed it.");
        foreach (var (name, axis) in sampleAxes ?? new Dictionary<string, int>())
        {
            var input = modelInputs.FirstOrDefault(i => i.Name == name)
                ?? throw DatasetErrors.Mismatch($"A sample axis is given for '{name}', but the model has no input of that name; its inputs are: {string.Join(", ", modelInputs.Select(i => i.Name))}.");
            if (axis < 0 || axis >= input.Shape.Count)
                throw DatasetErrors.Mismatch(
                    input.Shape.Count == 0
                        ? $"Sample axis {axis} is given for model input '{name}', but it is a scalar (rank 0) with no axis to hold samples; feed it a 0-d array (a constant) instead."
                        : $"Sample axis {axis} is given for model input '{name}' {DatasetErrors.FormatShape(input.Shape)}, which has axes 0 to {input.Shape.Count - 1}.");
        }

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

        var axes = SampleAxesOf(matched, sampleAxes);
        int? samplesPerRun = null;
        var inputs = new List<NpyArray>(matched.Count);
        string? firstFixed = null;
        for (int i = 0; i < matched.Count; i++)
        {
            var (input, array) = matched[i];
            CheckShape(input, array, axes[i]);
            if (axes[i] is int axis && input.Shape[axis] is long fixedSize and > 0)
            {
                if (samplesPerRun is int other && other != fixedSize)
                    throw DatasetErrors.Mismatch(
                        $"The model fixes its inputs' sample axes at different sizes ({other} for '{firstFixed}', {fixedSize} on axis {axis} of '{input.Name}'); they cannot be fed from one set of samples.");
                samplesPerRun = checked((int)fixedSize);
                firstFixed ??= input.Name;
            }
            inputs.Add(ConvertAndCheckFinite(input, array));
        }

        var sampled = Enumerable.Range(0, inputs.Count).Where(i => axes[i] is not null).ToList();
        long samples = inputs[sampled[0]].Shape[axes[sampled[0]]!.Value];
        foreach (var i in sampled)
            if (inputs[i].Shape[axes[i]!.Value] != samples)
                throw DatasetErrors.Invalid(
                    $"The arrays disagree on the number of samples (the size of their sample axis): " +
                    string.Join(", ", sampled.Select(k => $"'{inputs[k].Name}' has {inputs[k].Shape[axes[k]!.Value]} on axis {axes[k]}")) + ".");
        var first = inputs[sampled[0]];
        if (samples == 0)
            throw DatasetErrors.Invalid($"The dataset holds no samples: array '{first.Name}' has 0 along its sample axis {axes[sampled[0]]}.");
        if (samples > int.MaxValue)
            throw DatasetErrors.TooLarge($"The dataset holds {samples} samples; at most {int.MaxValue} are used.");
        if (samplesPerRun is int k && samples % k != 0)
            throw DatasetErrors.Mismatch(
                $"The model takes exactly {k} samples per run (input '{firstFixed}' fixes its sample axis at {k}), but the dataset holds {samples}, not a multiple of {k}.");

        var labels = labelsArray is null ? null : ReadLabels(labelsArray, samples);
        return new CalibrationSet(inputs, axes, labels, (int)samples, samplesPerRun);
    }

    /// <summary>
    /// The sample axis of one input by the rule in the remarks, ignoring constants: the given axis, else the
    /// one dynamic axis of the declared shape when there is exactly one, else axis 0 (null for a scalar).
    /// </summary>
    public static int? DefaultSampleAxis(ValueDescription input, IReadOnlyDictionary<string, int>? sampleAxes = null)
    {
        ArgumentNullException.ThrowIfNull(input);
        if (sampleAxes is not null && sampleAxes.TryGetValue(input.Name, out var given)) return given;
        if (input.Shape.Count == 0) return null;
        var dynamic = Enumerable.Range(0, input.Shape.Count).Where(a => input.Shape[a] is not > 0).ToList();
        return dynamic.Count == 1 ? dynamic[0] : 0;
    }

    /// <summary>Each input's samples [<paramref name="start"/>, start + count) along its sample axis, as new arrays; constants as they are.</summary>
    public IReadOnlyList<NpyArray> Slice(int start, int count)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(start);
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(start + (long)count, SampleCount, nameof(count));
        var result = new NpyArray[Inputs.Count];
        for (int i = 0; i < Inputs.Count; i++)
        {
            var input = Inputs[i];
            if (SampleAxes[i] is not int axis)
            {
                result[i] = input;
                continue;
            }

            var data = SampleSlicer.Slice(input.Data, input.Shape, axis, start, count, count, out var shape);
            result[i] = input with { Shape = shape, Data = data };
        }
        return result;
    }

    private static int?[] SampleAxesOf(List<(ValueDescription Input, NpyArray Array)> matched, IReadOnlyDictionary<string, int>? sampleAxes)
    {
        var axes = new int?[matched.Count];
        var constant = new bool[matched.Count];
        for (int i = 0; i < matched.Count; i++)
        {
            var (input, array) = matched[i];
            axes[i] = DefaultSampleAxis(input, sampleAxes);
            bool given = sampleAxes?.ContainsKey(input.Name) == true;
            constant[i] = !given && array.Shape.Count == input.Shape.Count
                && input.Shape.Select((d, a) => d is long need && need > 0 && array.Shape[a] == need).All(x => x);
        }

        // When every array matches its input's whole shape, they are one set of samples (a model that
        // fixes its batch, fed exactly one batch), not constants with nothing to batch.
        if (constant.All(c => c))
        {
            for (int i = 0; i < matched.Count; i++) constant[i] = matched[i].Input.Shape.Count == 0;
            if (constant.All(c => c))
                throw DatasetErrors.Mismatch(
                    $"Every model input is a scalar ({string.Join(", ", matched.Select(m => $"'{m.Input.Name}'"))}), so no input has an axis to hold samples; a dataset cannot feed this model.");
        }

        for (int i = 0; i < matched.Count; i++)
            if (constant[i]) axes[i] = null;
        return axes;
    }

    private static void CheckShape(ValueDescription input, NpyArray array, int? sampleAxis)
    {
        string Describe() =>
            $"array '{array.Name}' has shape {DatasetErrors.FormatShape(array.Shape)} but model input '{input.Name}' takes {DatasetErrors.FormatShape(input.Shape)}";
        if (input.Shape.Count == 0 && array.Shape.Count != 0)
            throw DatasetErrors.Mismatch(
                $"Model input '{input.Name}' is a scalar (rank 0): it takes one 0-d array, fed unchanged to every run, but array '{array.Name}' has shape {DatasetErrors.FormatShape(array.Shape)}.");
        if (array.Shape.Count != input.Shape.Count)
            throw DatasetErrors.Mismatch(
                $"The {Describe()}: rank {array.Shape.Count} where the model needs rank {input.Shape.Count} (samples lie along axis {sampleAxis ?? 0}).");
        for (int axis = 0; axis < input.Shape.Count; axis++)
            if (axis != sampleAxis && input.Shape[axis] is long need and >= 0 && array.Shape[axis] != need)
                throw DatasetErrors.Mismatch($"The {Describe()}: axis {axis} is {array.Shape[axis]}, the model needs {need} (the samples lie along axis {sampleAxis}).");

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

    /// <summary>
    /// Throws <c>dataset-labels-out-of-range</c> unless every label is a class of the judged output: an
    /// index in [0, <paramref name="classes"/>), the length of that output's last axis. A label outside
    /// can never match the output's argmax, so accuracy (and any accuracy budget) would be silently wrong.
    /// </summary>
    public void CheckLabels(long classes, string outputName)
    {
        if (Labels is not { } labels || classes <= 0)
        {
            return;
        }

        for (var i = 0; i < labels.Count; i++)
        {
            if (labels[i] >= classes)
            {
                throw new EngineException(
                    DatasetErrors.LabelsOutOfRangeCode,
                    $"Array '{LabelsName}' holds {labels[i]} at index {i}, but the model's output '{outputName}', on which accuracy is judged, has {classes} classes: labels must lie in [0, {classes}). Check that the labels are class indices of this model.");
            }
        }
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
