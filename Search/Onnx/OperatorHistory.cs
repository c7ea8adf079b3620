namespace Bitbudget.Search.Onnx;

/// <summary>
/// What the ONNX operator changelog (https://github.com/onnx/onnx/blob/main/docs/Changelog.md) says
/// about raising a model between opsets <see cref="LowestSource"/> and <see cref="HighestTarget"/>:
/// which standard operators kept their meaning for every attribute and input an older model can use,
/// and which IR version each opset came with. Operators whose signature or meaning changed are
/// rewritten by <see cref="OpsetRaiser"/>; any standard operator in neither list is refused.
/// </summary>
internal static class OperatorHistory
{
    /// <summary>The oldest opset a raise starts from (older models change BatchNormalization, Upsample and Scan too).</summary>
    public const long LowestSource = 9;

    /// <summary>
    /// The newest opset a raise goes to: the changes up to this version are covered here, and the bundled
    /// ONNX Runtime runs it (checked by the opset-22 tests).
    /// </summary>
    public const long HighestTarget = 22;

    /// <summary>
    /// Standard operators whose later versions only add element types, or add attributes and optional
    /// inputs whose defaults keep the old behaviour (for example MaxPool's ceil_mode at 10, ArgMax's
    /// select_last_index at 12, Reshape's allowzero at 14, Shape's start/end at 15, Cast's saturate at 19),
    /// from the changelog's version sections 10 to 22. If, Loop and Scan are here too; their bodies are
    /// raised like the main graph.
    /// </summary>
    public static readonly IReadOnlySet<string> Unchanged = new HashSet<string>(StringComparer.Ordinal)
    {
        "Abs", "Acos", "Acosh", "Add", "And", "ArgMax", "ArgMin", "Asin", "Asinh", "Atan", "Atanh",
        "AveragePool", "Bernoulli", "BitShift", "BitwiseAnd", "BitwiseNot", "BitwiseOr", "BitwiseXor",
        "BlackmanWindow", "Cast", "CastLike", "Ceil", "Celu", "CenterCropPad", "Col2Im", "Compress", "Concat",
        "ConcatFromSequence", "Constant", "ConstantOfShape", "Conv", "ConvTranspose", "Cos", "Cosh", "CumSum",
        "DepthToSpace", "Det", "Div", "Einsum", "Elu", "Equal", "Erf", "Exp", "Expand", "EyeLike", "Flatten",
        "Floor", "GRU", "Gather", "GatherElements", "GatherND", "Gelu", "Gemm", "GlobalAveragePool",
        "GlobalLpPool", "GlobalMaxPool", "Greater", "GreaterOrEqual", "HammingWindow", "HannWindow",
        "HardSigmoid", "HardSwish", "Identity", "If", "InstanceNormalization", "IsInf", "IsNaN", "LRN", "LSTM",
        "LayerNormalization", "LeakyRelu", "Less", "LessOrEqual", "Log", "Loop", "LpNormalization", "LpPool",
        "MatMul", "Max", "MaxPool", "MaxRoiPool", "MaxUnpool", "Mean", "MeanVarianceNormalization",
        "MelWeightMatrix", "Min", "Mish", "Mod", "Mul", "Multinomial", "Neg", "NonMaxSuppression", "NonZero",
        "Not", "OneHot", "Or", "PRelu", "Pow", "RNN", "RandomNormal", "RandomNormalLike", "RandomUniform",
        "RandomUniformLike", "Range", "Reciprocal", "Relu", "Reshape", "ReverseSequence", "Round", "STFT", "Scan",
        "ScatterElements", "ScatterND", "Selu", "SequenceAt", "SequenceConstruct", "SequenceEmpty",
        "SequenceErase", "SequenceInsert", "SequenceLength", "Shape", "Shrink", "Sigmoid", "Sign", "Sin", "Sinh",
        "Size", "Softplus", "Softsign", "SpaceToDepth", "SplitToSequence", "Sqrt", "Sub", "Sum", "Tan", "Tanh",
        "ThresholdedRelu", "Tile", "Transpose", "Trilu", "Unique", "Where", "Xor",
    };

    /// <summary>
    /// The IR version each opset was released with (onnx/helper.py's version table, from memory): a model
    /// raised to an opset gets at least this IR version.
    /// </summary>
    public static long MinimumIrVersion(long opset) => opset switch
    {
        <= 9 => 4,
        10 => 5,
        11 => 6,
        <= 14 => 7,
        <= 18 => 8,
        <= 20 => 9,
        _ => 10,
    };
}
