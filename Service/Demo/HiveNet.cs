using System.Numerics.Tensors;

namespace Bitbudget.Service.Demo;

/// <summary>
/// The demo classifier's parameters and its inference-mode forward pass:
/// Conv(1->8, 3x3, pad 1) -> BN -> Relu -> Conv(8->16, 3x3, stride 2, pad 1) -> BN -> Relu ->
/// Flatten -> Gemm(1024->32) -> Relu -> Gemm(32->4). Arrays use the ONNX layouts (Conv weights
/// [out, in, 3, 3], Gemm weights [out, in] for transB = 1) so the exporter writes them as they are.
/// </summary>
internal sealed class HiveNet
{
    public const int InputSize = HiveSoundSet.Bands;
    public const int Channels1 = 8;
    public const int Channels2 = 16;
    public const int Stride2 = 2;
    public const int Hidden = 32;
    public const int Classes = HiveSoundSynthesizer.ClassCount;
    public const float BatchNormEpsilon = 1e-5f;

    public static readonly int Size2 = ConvolutionKernels.OutputSize(InputSize, Stride2);
    public static readonly int Positions1 = InputSize * InputSize;
    public static readonly int Positions2 = Size2 * Size2;
    public static readonly int Flattened = Channels2 * Positions2;

    public float[] Conv1Weight { get; } = new float[Channels1 * 1 * 9];
    public float[] Bn1Scale { get; } = Filled(Channels1, 1f);
    public float[] Bn1Bias { get; } = new float[Channels1];
    public float[] Bn1Mean { get; } = new float[Channels1];
    public float[] Bn1Variance { get; } = Filled(Channels1, 1f);
    public float[] Conv2Weight { get; } = new float[Channels2 * Channels1 * 9];
    public float[] Bn2Scale { get; } = Filled(Channels2, 1f);
    public float[] Bn2Bias { get; } = new float[Channels2];
    public float[] Bn2Mean { get; } = new float[Channels2];
    public float[] Bn2Variance { get; } = Filled(Channels2, 1f);
    public float[] Fc1Weight { get; } = new float[Hidden * Flattened];
    public float[] Fc1Bias { get; } = new float[Hidden];
    public float[] Fc2Weight { get; } = new float[Classes * Hidden];
    public float[] Fc2Bias { get; } = new float[Classes];

    /// <summary>He-normal initialisation (He et al., 2015) for the Relu layers; the output layer gets the same fan-in scaling.</summary>
    public static HiveNet CreateInitialised(ulong seed)
    {
        var net = new HiveNet();
        var random = new Pcg32(seed, stream: 7);
        HeNormal(net.Conv1Weight, 9, random);
        HeNormal(net.Conv2Weight, Channels1 * 9, random);
        HeNormal(net.Fc1Weight, Flattened, random);
        HeNormal(net.Fc2Weight, Hidden, random);
        return net;
    }

    /// <summary>Inference-mode logits [count, 4] for patches in NCHW order, BN using its running statistics.</summary>
    public float[] Predict(ReadOnlySpan<float> spectrograms)
    {
        int count = spectrograms.Length / Positions1;
        if (count * Positions1 != spectrograms.Length)
        {
            throw new ArgumentException("The input is not a whole number of 16x16 patches.", nameof(spectrograms));
        }

        var logits = new float[count * Classes];
        var columns1 = new float[9 * Positions1];
        var z1 = new float[Channels1 * Positions1];
        var columns2 = new float[Channels1 * 9 * Positions2];
        var z2 = new float[Flattened];
        var hidden = new float[Hidden];
        for (int n = 0; n < count; n++)
        {
            ConvolutionKernels.Unfold(spectrograms.Slice(n * Positions1, Positions1), 1, InputSize, 1, columns1);
            ConvolutionKernels.Multiply(Conv1Weight, columns1, Channels1, Positions1, z1);
            NormaliseAndRectify(z1, Positions1, Bn1Scale, Bn1Bias, Bn1Mean, Bn1Variance);
            ConvolutionKernels.Unfold(z1, Channels1, InputSize, Stride2, columns2);
            ConvolutionKernels.Multiply(Conv2Weight, columns2, Channels2, Positions2, z2);
            NormaliseAndRectify(z2, Positions2, Bn2Scale, Bn2Bias, Bn2Mean, Bn2Variance);
            for (int j = 0; j < Hidden; j++)
            {
                hidden[j] = Math.Max(0f, TensorPrimitives.Dot(Fc1Weight.AsSpan(j * Flattened, Flattened), z2) + Fc1Bias[j]);
            }

            for (int j = 0; j < Classes; j++)
            {
                logits[(n * Classes) + j] = TensorPrimitives.Dot(Fc2Weight.AsSpan(j * Hidden, Hidden), hidden) + Fc2Bias[j];
            }
        }

        return logits;
    }

    /// <summary>Share of patches whose largest logit is at the label (first maximum wins ties).</summary>
    public static double Accuracy(ReadOnlySpan<float> logits, ReadOnlySpan<long> labels)
    {
        if (labels.Length == 0)
        {
            return 0.0;
        }

        int correct = 0;
        for (int n = 0; n < labels.Length; n++)
        {
            if (TensorPrimitives.IndexOfMax(logits.Slice(n * Classes, Classes)) == labels[n])
            {
                correct++;
            }
        }

        return (double)correct / labels.Length;
    }

    private static void NormaliseAndRectify(Span<float> values, int positions, float[] scale, float[] bias, float[] mean, float[] variance)
    {
        for (int c = 0; c < scale.Length; c++)
        {
            // The ONNX BatchNormalization formula: y = scale * (x - mean) / sqrt(var + epsilon) + B.
            float gain = scale[c] / MathF.Sqrt(variance[c] + BatchNormEpsilon);
            float shift = bias[c] - (mean[c] * gain);
            Span<float> row = values.Slice(c * positions, positions);
            TensorPrimitives.Multiply(row, gain, row);
            TensorPrimitives.Add(row, shift, row);
            TensorPrimitives.Max(row, 0f, row);
        }
    }

    private static void HeNormal(float[] weights, int fanIn, Pcg32 random)
    {
        double deviation = Math.Sqrt(2.0 / fanIn);
        for (int i = 0; i < weights.Length; i++)
        {
            weights[i] = (float)(deviation * random.NextGaussian());
        }
    }

    private static float[] Filled(int length, float value)
    {
        var array = new float[length];
        Array.Fill(array, value);
        return array;
    }
}
