using Bitbudget.Search.Onnx;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// What a search on a dataset will hold in memory at its peak, from the model's shapes and the dataset's .npy
/// headers alone (nothing decoded): the decoded arrays, an FP32 copy of any input array of another float type,
/// the reference outputs and one trial's outputs for every sample, the activation cache at its cap (the cache
/// grows with the calibration set until that cap, see <see cref="TrialSessionOptions.MaxCachedActivationBytes"/>),
/// the weights three times over (the loaded model, its FP32 weights and the weights fed to the session), and, when the
/// search rounds with compensation or corrects biases, the layers' input moments (<see cref="LayerInputCollector.MomentBytes"/>:
/// Columns² + Columns doubles per group, whatever the sample count).
/// Output dimensions the model leaves dynamic count as 1, so the figure is a lower bound where they are.
/// </summary>
/// <param name="Bytes">The estimate: <see cref="FixedBytes"/> + <see cref="PerSampleBytes"/> x <see cref="Samples"/>.</param>
/// <param name="PerSampleBytes">Bytes each calibration sample adds.</param>
/// <param name="FixedBytes">Bytes the search takes whatever the sample count (weights, activation cache cap).</param>
public sealed record SearchMemoryEstimate(long Bytes, long PerSampleBytes, long FixedBytes, long Samples)
{
    /// <param name="heldBytes">Bytes the caller holds for the whole search besides (e.g. the dataset file read whole).</param>
    /// <param name="inputMomentBytes">Bytes of the layers' input moments the search gathers (0 when it gathers none).</param>
    /// <param name="sampleAxes">Sample axes given outright, by input name; the others follow <see cref="CalibrationSet"/>'s rule, and an
    /// array of its input's whole fixed shape is a constant, held once rather than per sample.</param>
    public static SearchMemoryEstimate Of(OnnxModel model, IReadOnlyList<NpyArrayInfo> arrays, long activationCacheBytes, long heldBytes = 0, IReadOnlyDictionary<string, int>? sampleAxes = null, long inputMomentBytes = 0)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(arrays);
        var inputs = arrays.Select(array => model.Inputs.FirstOrDefault(i => i.Name == array.Name) ?? (model.Inputs.Count == 1 && array.Name == DatasetReader.SingleArrayName ? model.Inputs[0] : null)).ToList();
        var constant = arrays.Select((array, k) => inputs[k] is { } input && sampleAxes?.ContainsKey(input.Name) != true
            && array.Shape.Count == input.Shape.Count && input.Shape.Select((d, a) => d is > 0 && array.Shape[a] == d).All(x => x)).ToList();
        if (constant.Where((_, k) => inputs[k] is not null).All(c => c))
        {
            // Every array of its input's whole shape: one run of samples, not constants (CalibrationSet's rule).
            constant = constant.Select((_, k) => inputs[k] is { Shape.Count: 0 }).ToList();
        }

        long samples = 0;
        double perSample = 0, constantBytes = 0;
        for (var k = 0; k < arrays.Count; k++)
        {
            var array = arrays[k];
            var input = inputs[k];
            if (constant[k])
            {
                constantBytes += array.ByteCount;
                continue;
            }

            // A labels array or a sampled input: its samples lie along its input's sample axis (0 without an input).
            var axis = input is null ? 0 : CalibrationSet.DefaultSampleAxis(input, sampleAxes) ?? 0;
            var count = axis < array.Shape.Count ? array.Shape[axis] : array.SampleCount;
            samples = Math.Max(samples, count);
            perSample += count > 0 ? array.ByteCount / (double)count : 0;
            if (input is { ElementType: ElementType.Float32 } && array.ElementType is ElementType.Float16 or ElementType.Float64)
            {
                var elements = array.Shape.Where((_, a) => a != axis).Aggregate(1.0, (p, d) => p * d);
                perSample += elements * sizeof(float);
            }
        }

        foreach (var output in model.Outputs)
        {
            // Reference outputs plus the outputs of the trial being compared with them, FP32. With one dynamic
            // axis (the batch, wherever it is) a sample holds every fixed axis; otherwise axis 0 is taken as the batch.
            var dynamicAxes = output.Shape.Count(d => d is not > 0);
            var elements = (dynamicAxes == 1 ? output.Shape : output.Shape.Skip(1)).Aggregate(1.0, (p, d) => p * (d is > 0 ? d.Value : 1));
            perSample += 2 * elements * sizeof(float);
        }

        var weights = model.Layers.Sum(l => (double)l.ParameterCount) * sizeof(float) * 3;
        var fixedBytes = weights + activationCacheBytes + heldBytes + constantBytes + inputMomentBytes;
        var total = fixedBytes + (perSample * samples);
        return new SearchMemoryEstimate(Clamp(total), Clamp(Math.Ceiling(perSample)), Clamp(fixedBytes), samples);
    }

    /// <summary>Refuses with <c>search-too-large</c> when the estimate passes <paramref name="limitBytes"/>, saying how many samples would fit.</summary>
    /// <param name="limitName">How the caller names the limit, so the message says which setting to raise.</param>
    public void Check(long limitBytes, string limitName)
    {
        if (Bytes <= limitBytes)
            return;
        var fit = PerSampleBytes > 0 ? Math.Max(0, (limitBytes - FixedBytes) / PerSampleBytes) : 0;
        var advice = fit > 0
            ? $"at most {fit} of its {Samples} samples would fit, so send a smaller calibration set or raise {limitName}"
            : $"even one sample does not fit beside the weights, the activation cache and the dataset file, so raise {limitName}";
        throw new EngineException(
            "search-too-large",
            $"A search on this model and dataset would hold about {DatasetErrors.FormatBytes(Bytes)} in memory " +
            $"({DatasetErrors.FormatBytes(PerSampleBytes)} per sample for {Samples} samples, plus {DatasetErrors.FormatBytes(FixedBytes)} for weights, the activation cache, the layers' input moments and the dataset file), " +
            $"more than the {DatasetErrors.FormatBytes(limitBytes)} of {limitName}; {advice}.");
    }

    private static long Clamp(double bytes) => bytes >= long.MaxValue ? long.MaxValue : (long)bytes;
}
