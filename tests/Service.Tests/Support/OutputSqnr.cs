using Microsoft.ML.OnnxRuntime;
using Microsoft.ML.OnnxRuntime.Tensors;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// Runs two ONNX models in ONNX Runtime (Microsoft.ML.OnnxRuntime, CPU) on the same input and gives the SQNR of the
/// second's outputs against the first's, computed here from scratch: 10 log10(sum ref^2 / sum (q - ref)^2)
/// over every value of every output.
/// </summary>
internal static class OutputSqnr
{
    public static double Db(byte[] reference, byte[] quantized, string inputName, float[] data, int[] shape)
    {
        var expected = Outputs(reference, inputName, data, shape);
        var actual = Outputs(quantized, inputName, data, shape);
        Assert.Equal(expected.Length, actual.Length);
        double signal = 0, noise = 0;
        for (var i = 0; i < expected.Length; i++)
        {
            signal += (double)expected[i] * expected[i];
            var d = (double)actual[i] - expected[i];
            noise += d * d;
        }

        Assert.True(noise > 0, "The quantized model gives exactly the FP32 outputs; nothing was quantized.");
        return 10 * Math.Log10(signal / noise);
    }

    /// <summary>Every output of the model, in output order, flattened into one array.</summary>
    public static float[] Outputs(byte[] model, string inputName, float[] data, int[] shape)
    {
        using var session = new InferenceSession(model);
        using var results = session.Run([NamedOnnxValue.CreateFromTensor(inputName, new DenseTensor<float>(data, shape))]);
        return results.SelectMany(r => r.AsTensor<float>().ToArray()).ToArray();
    }
}
