using System.Globalization;
using Bitbudget.Search.Onnx;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Proves an opset raise on the data the search will use: ONNX Runtime runs the upload and its raised
/// form (both before normalisation) on the whole calibration set, and every output must agree bit for
/// bit or within <see cref="Tolerance"/> relative; otherwise the raise is refused with code
/// <c>opset-raise-mismatch</c>, naming the worst output.
/// </summary>
/// <remarks>
/// The relative difference is ||after - before|| / ||before|| per output (L2 norms, an SQNR of at least
/// 120 dB at the tolerance). A rewrite that changes meaning (a wrong softmax axis, a shifted resize grid)
/// moves outputs by 1e-3 or more; what stays below 1e-6 is ONNX Runtime summing in another order in a
/// newer kernel of an unchanged operator (measured: AveragePool from opset 19 differs from 11-18 by one
/// float step, which the OCR recogniser's attention amplifies to about 5e-7 in L2 and 1.3e-6 in its
/// largest element). The largest single-element difference is reported beside it.
/// </remarks>
public static class OpsetRaiseCheck
{
    /// <summary>Largest accepted ||after - before|| / ||before|| per output (L2; issue 8: "bit for bit or within 1e-6 relative").</summary>
    public const double Tolerance = 1e-6;

    /// <summary>
    /// Compares the model before and after its raise; returns null when the model was not raised (or the
    /// raise rewrote nothing), throws <see cref="EngineException"/> when the outputs differ.
    /// </summary>
    public static OpsetRaiseComparison? Verify(OnnxModel model, CalibrationSet data, int maxBatch = 32)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(data);
        if (model.Raise is not { } raise || model.RaisedGraphs is not { } graphs)
        {
            return null;
        }

        return Verify(raise, graphs, model.Inputs, data, maxBatch);
    }

    /// <summary>The check on two serialized graphs; throws <c>opset-raise-mismatch</c> when an output moved beyond <see cref="Tolerance"/>.</summary>
    internal static OpsetRaiseComparison Verify(OpsetRaise raise, RaisedGraphs graphs, IReadOnlyList<ValueDescription> inputs, CalibrationSet data, int maxBatch)
    {
        var comparison = new OpsetRaiseComparison(raise.FromOpset, raise.ToOpset, Compare(graphs.Original, graphs.Raised, inputs, data, maxBatch));
        var worst = comparison.Outputs.MaxBy(o => o.RelativeDifference);
        if (worst is not null && !(worst.RelativeDifference <= Tolerance))
        {
            throw new EngineException(
                "opset-raise-mismatch",
                string.Create(
                    CultureInfo.InvariantCulture,
                    $"Raising the model from opset {raise.FromOpset} to {raise.ToOpset} changed its outputs in ONNX Runtime on the calibration set: " +
                    $"output '{worst.Output}' differs by {worst.RelativeDifference:G3} relative (at most {Tolerance:G1} is accepted). Export the model at the opset you need instead."));
        }

        return comparison;
    }

    /// <summary>Runs both serialized models on every batch of <paramref name="data"/> and compares each output.</summary>
    internal static IReadOnlyList<OutputDifference> Compare(byte[] before, byte[] after, IReadOnlyList<ValueDescription> inputs, CalibrationSet data, int maxBatch)
    {
        // Graph optimisations off: the check is about what the two graphs compute as written.
        using var options = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_DISABLE_ALL };
        using var original = Open(before, options, "the model as uploaded");
        using var raised = Open(after, options, "the model after its opset raise");
        var plan = BatchPlan.For(data, maxBatch);
        var names = original.OutputNames.ToArray();
        var maxDiff = new double[names.Length];
        var maxRef = new double[names.Length];
        var sumDiff = new double[names.Length];
        var sumRef = new double[names.Length];
        var exact = Enumerable.Repeat(true, names.Length).ToArray();
        var inputNames = inputs.Select(i => i.Name).ToArray();
        using var runOptions = new RunOptions();
        for (var b = 0; b < plan.BatchCount; b++)
        {
            var (start, count) = plan.Batch(b);
            var feeds = inputs.Select((input, i) => OrtTensors.SliceSamples(data.Inputs[i], data.SampleAxes[i], start, count, plan.RowsFed(count))).ToArray();
            try
            {
                using var expected = original.Run(runOptions, inputNames, feeds, names);
                using var actual = raised.Run(runOptions, inputNames, feeds, names);
                for (var o = 0; o < names.Length; o++)
                {
                    // Whole outputs: an output's samples need not lie on axis 0, and padding rows are fed to both models alike.
                    var a = OrtTensors.ToFloat(OrtTensors.CopyRows(expected[o], int.MaxValue, out var expectedShape));
                    var r = OrtTensors.ToFloat(OrtTensors.CopyRows(actual[o], int.MaxValue, out var actualShape));
                    if (!expectedShape.SequenceEqual(actualShape))
                    {
                        throw new EngineException(
                            "opset-raise-mismatch",
                            $"Raising the model changed the shape of output '{names[o]}' from [{string.Join(", ", expectedShape)}] to [{string.Join(", ", actualShape)}]; export the model at the opset you need instead.");
                    }

                    Accumulate(a, r, ref maxDiff[o], ref maxRef[o], ref sumDiff[o], ref sumRef[o], ref exact[o]);
                }
            }
            catch (OnnxRuntimeException e)
            {
                throw new EngineException("opset-raise-invalid", $"ONNX Runtime cannot run the model before or after its opset raise on this dataset: {e.Message}", e);
            }
            finally
            {
                foreach (var feed in feeds)
                {
                    feed.Dispose();
                }
            }
        }

        return names.Select((name, o) => exact[o]
                ? new OutputDifference(name, 0, 0, true)
                : new OutputDifference(name, Ratio(Math.Sqrt(sumDiff[o]), Math.Sqrt(sumRef[o])), Ratio(maxDiff[o], maxRef[o]), false))
            .ToList();
    }

    private static double Ratio(double difference, double reference) => reference == 0 ? difference : difference / reference;

    private static void Accumulate(float[] expected, float[] actual, ref double maxDiff, ref double maxRef, ref double sumDiff, ref double sumRef, ref bool exact)
    {
        for (var i = 0; i < expected.Length; i++)
        {
            var e = expected[i];
            var a = actual[i];
            if (float.IsFinite(e))
            {
                maxRef = Math.Max(maxRef, Math.Abs(e));
                sumRef += (double)e * e;
            }

            if (BitConverter.SingleToInt32Bits(e) == BitConverter.SingleToInt32Bits(a) || (float.IsNaN(e) && float.IsNaN(a)))
            {
                continue;
            }

            exact = false;
            var diff = Math.Abs((double)e - a);
            diff = double.IsNaN(diff) ? double.PositiveInfinity : diff;
            maxDiff = Math.Max(maxDiff, diff);
            sumDiff += diff * diff;
        }
    }

    private static InferenceSession Open(byte[] model, SessionOptions options, string what)
    {
        try
        {
            return new InferenceSession(model, options);
        }
        catch (OnnxRuntimeException e)
        {
            throw new EngineException("opset-raise-invalid", $"ONNX Runtime cannot load {what}: {e.Message}", e);
        }
    }
}
