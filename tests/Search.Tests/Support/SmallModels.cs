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

    /// <summary>
    /// A tiny streaming detector with a recurrent state and no recurrent operator:
    /// frame [n,8] -> MatMul(8x6) "input" scaled by rate/16000 (rate: a scalar int64 input), plus
    /// mean over axis 0 of state [2,n,6] -> MatMul(6x6) "recurrent"; Tanh = h; h -> MatMul(6x1) "head"
    /// -> Sigmoid = probability [n,1]; next_state [2,n,6] = (40 h, 40 mean state), stacked on axis 0 by
    /// broadcasting against a [1,1,1] constant. The next state carries thousands of times the power of
    /// the probability, so pooled SQNR cannot see what the head's bit width does to the probability.
    /// </summary>
    public static byte[] StreamingBytes(long opset = 13) =>
        new GraphBuilder()
            .Opset(opset)
            .Input("frame", -1, 8)
            .Input("state", 2, -1, 6)
            .Input("rate", P.TensorProto.Types.DataType.Int64)
            .Initializer("w_in", [8, 6], GraphBuilder.RandomValues(11, 48, 0.6f))
            .Initializer("w_rec", [6, 6], GraphBuilder.RandomValues(12, 36, 0.8f))
            .Initializer("w_head", [6, 1], GraphBuilder.RandomValues(13, 6, 1.5f))
            .Initializer("per_hz", [], [1f / 16000])
            .Initializer("gain", [1, 1, 1], [40f])
            .Node("MatMul", ["frame", "w_in"], ["a"], "input")
            .Node("Cast", ["rate"], ["rate_f"], "rate_to_float", new P.AttributeProto { Name = "to", Type = P.AttributeProto.Types.AttributeType.Int, I = (long)P.TensorProto.Types.DataType.Float })
            .Node("Mul", ["rate_f", "per_hz"], ["rate_scale"], "rate_scale")
            .Node("Mul", ["a", "rate_scale"], ["a_scaled"], "scale_input")
            .Node("ReduceMean", ["state"], ["s"], "state_mean", new P.AttributeProto { Name = "axes", Type = P.AttributeProto.Types.AttributeType.Ints, Ints = { 0 } }, GraphBuilder.IntAttribute("keepdims", 0))
            .Node("MatMul", ["s", "w_rec"], ["r"], "recurrent")
            .Node("Add", ["a_scaled", "r"], ["pre"], "mix")
            .Node("Tanh", ["pre"], ["h"], "tanh")
            .Node("MatMul", ["h", "w_head"], ["logit"], "head")
            .Node("Sigmoid", ["logit"], ["probability"], "sigmoid")
            .Node("Mul", ["h", "gain"], ["h_state"], "h_state")
            .Node("Mul", ["s", "gain"], ["s_state"], "s_state")
            .Node("Concat", ["h_state", "s_state"], ["next_state"], "stack", GraphBuilder.IntAttribute("axis", 0))
            .Output("probability", -1, 1)
            .Output("next_state", 2, -1, 6)
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
