using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Support;

/// <summary>
/// Small synthetic models with calibration data for tests that run whole searches: fast enough for
/// hundreds of trials, shaped like real networks (a skip connection, mixed MatMul/Gemm/Conv).
/// </summary>
internal static class SmallModels
{
    /// <summary>
    /// x [n,16] -> MatMul(16x24) -> Relu = h1 -> Gemm(24x24, bias) -> Relu -> Add h1 (skip) -> MatMul(24x10) -> logits [n,10].
    /// The skip makes the last layer's cut-set hold a tensor made early on.
    /// </summary>
    public static OnnxModel Mlp(long opset = 13, long batch = -1, int seed = 1)
    {
        var bytes = new GraphBuilder()
            .Opset(opset)
            .Input("x", batch, 16)
            .Initializer("w1", [16, 24], Scaled(GraphBuilder.RandomValues(seed, 16 * 24, 0.5f), 1))
            .Initializer("w2", [24, 24], Scaled(GraphBuilder.RandomValues(seed + 1, 24 * 24, 0.4f), 2))
            .Initializer("b2", [24], GraphBuilder.RandomValues(seed + 2, 24, 0.1f))
            .Initializer("w3", [24, 10], Scaled(GraphBuilder.RandomValues(seed + 3, 24 * 10, 0.5f), 3))
            .Node("MatMul", ["x", "w1"], ["m1"], "fc1")
            .Node("Relu", ["m1"], ["h1"], "relu1")
            .Node("Gemm", ["h1", "w2", "b2"], ["m2"], "fc2")
            .Node("Relu", ["m2"], ["h2"], "relu2")
            .Node("Add", ["h2", "h1"], ["h3"], "skip")
            .Node("MatMul", ["h3", "w3"], ["logits"], "fc3")
            .Output("logits", batch, 10)
            .ToBytes();
        return OnnxModel.Load(bytes, "mlp");
    }

    /// <summary>
    /// An MLP as an old exporter writes it, for opset raises: x [n,16] -> MatMul(16x24) -> Clip(0, 6) with
    /// the opset-9 min/max attributes -> MatMul(24x10) -> Softmax(axis 1) -> probabilities [n,10]. Fed by <see cref="MlpData"/>.
    /// </summary>
    public static byte[] ClippedMlpBytes(long opset = 9, int seed = 1) =>
        new GraphBuilder()
            .Opset(opset)
            .Input("x", -1, 16)
            .Initializer("w1", [16, 24], Scaled(GraphBuilder.RandomValues(seed, 16 * 24, 0.5f), 1))
            .Initializer("w2", [24, 10], Scaled(GraphBuilder.RandomValues(seed + 1, 24 * 10, 0.5f), 2))
            .Node("MatMul", ["x", "w1"], ["m1"], "fc1")
            .Node("Clip", ["m1"], ["h1"], "relu6", GraphBuilder.FloatAttribute("min", 0f), GraphBuilder.FloatAttribute("max", 6f))
            .Node("MatMul", ["h1", "w2"], ["logits"], "fc2")
            .Node("Softmax", ["logits"], ["probabilities"], "softmax")
            .Output("probabilities", -1, 10)
            .ToBytes();

    /// <summary>Standard-normal inputs with labels from a fixed rule, so accuracy is meaningful but not perfect.</summary>
    public static CalibrationSet MlpData(OnnxModel model, int samples = 48, int seed = 5)
    {
        var random = new Random(seed);
        var x = new float[samples * 16];
        for (var i = 0; i < x.Length; i++)
        {
            x[i] = (float)(Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble()));
        }

        var labels = Enumerable.Range(0, samples).Select(s => (long)(Math.Abs(x[s * 16]) * 7 % 10)).ToArray();
        return CalibrationSet.Create(
            [new NpyArray("x", ElementType.Float32, [samples, 16], x), new NpyArray("labels", ElementType.Int64, [samples], labels)],
            model.Inputs);
    }

    /// <summary>Gives some rows (output channels) of a weight a much larger range, as real layers have.</summary>
    private static float[] Scaled(float[] values, int seed)
    {
        var random = new Random(seed);
        for (var i = 0; i < values.Length; i++)
        {
            if (random.NextDouble() < 0.02)
            {
                values[i] *= 6;
            }
        }

        return values;
    }

    /// <summary>The real OCR classifier with uniform-noise crops of 3 x 48 x 192 (the crop size its exporter uses, from memory; the model accepts any height and width).</summary>
    public static (OnnxModel Model, CalibrationSet Data) OcrClassifier(int samples = 8)
    {
        var model = OnnxModel.LoadFile(OcrModels.Classifier);
        var random = new Random(11);
        var x = new float[samples * 3 * 48 * 192];
        for (var i = 0; i < x.Length; i++)
        {
            x[i] = random.NextSingle() * 2 - 1;
        }

        var data = CalibrationSet.Create([new NpyArray(model.Inputs[0].Name, ElementType.Float32, [samples, 3, 48, 192], x)], model.Inputs);
        return (model, data);
    }

    public static P.ModelProto Parse(byte[] bytes) => P.ModelProto.Parser.ParseFrom(bytes);
}
