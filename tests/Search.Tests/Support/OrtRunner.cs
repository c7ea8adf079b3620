using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Tests.Support;

/// <summary>Runs a serialized model once with ONNX Runtime on CPU and returns every FP32 output.</summary>
internal static class OrtRunner
{
    /// <summary>
    /// Graph optimisations are off by default so ONNX Runtime computes the graph as written (it would
    /// otherwise fuse BatchNormalization into Conv itself and hide what a test compares).
    /// </summary>
    public static Dictionary<string, float[]> Run(byte[] model, IReadOnlyDictionary<string, Func<OrtValue>> feeds, bool optimise = false, Action<SessionOptions>? configure = null)
    {
        using var options = new SessionOptions
        {
            GraphOptimizationLevel = optimise ? GraphOptimizationLevel.ORT_ENABLE_ALL : GraphOptimizationLevel.ORT_DISABLE_ALL,
            IntraOpNumThreads = 1,
        };
        configure?.Invoke(options);
        using var session = new InferenceSession(model, options);
        var names = feeds.Keys.ToArray();
        var values = names.Select(n => feeds[n]()).ToArray();
        try
        {
            using var runOptions = new RunOptions();
            var outputNames = session.OutputNames.ToArray();
            using var outputs = session.Run(runOptions, names, values, outputNames);
            var result = new Dictionary<string, float[]>(StringComparer.Ordinal);
            for (var i = 0; i < outputNames.Length; i++)
            {
                result[outputNames[i]] = outputs[i].GetTensorDataAsSpan<float>().ToArray();
            }

            return result;
        }
        finally
        {
            foreach (var value in values)
            {
                value.Dispose();
            }
        }
    }

    public static Func<OrtValue> Floats(float[] data, params long[] shape) =>
        () => OrtValue.CreateTensorValueFromMemory(data, shape);

    public static Func<OrtValue> Bool(bool value) =>
        () => OrtValue.CreateTensorValueFromMemory(new[] { value }, Array.Empty<long>());

    public static Func<OrtValue> Int64(long value) =>
        () => OrtValue.CreateTensorValueFromMemory(new[] { value }, Array.Empty<long>());

    /// <summary>Largest |a - b| divided by the largest |a|: a relative error that ignores near-zero entries.</summary>
    public static double MaxRelativeDifference(float[] expected, float[] actual)
    {
        Assert.Equal(expected.Length, actual.Length);
        double maxDiff = 0, maxRef = 0;
        for (var i = 0; i < expected.Length; i++)
        {
            maxDiff = Math.Max(maxDiff, Math.Abs((double)expected[i] - actual[i]));
            maxRef = Math.Max(maxRef, Math.Abs((double)expected[i]));
        }

        return maxRef == 0 ? maxDiff : maxDiff / maxRef;
    }
}
