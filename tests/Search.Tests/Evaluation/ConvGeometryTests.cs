using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// The unfolded input patches (im2col) that compensated rounding builds H from, checked against ONNX Runtime's Conv
/// operator: for every output position, the weight of its group times its patch plus the bias must be what ORT's Conv
/// computes there. Grouped, strided, dilated, asymmetrically padded, SAME_UPPER/SAME_LOWER and 1-D convolutions.
/// </summary>
public sealed class ConvGeometryTests
{
    public static TheoryData<int, long[], long[], long[], long[], string?, bool> Cases => new()
    {
        // group, strides, dilations, pads, input [N, C, H, W] (or [N, C, W] for 1-D), auto_pad, one-dimensional
        { 1, [1, 1], [1, 1], [0, 0, 0, 0], [2, 3, 7, 6], null, false },
        { 2, [2, 1], [1, 2], [1, 0, 2, 1], [2, 4, 9, 8], null, false },
        { 4, [1, 2], [2, 1], [1, 1, 1, 1], [1, 4, 8, 7], null, false },
        { 1, [2, 2], [1, 1], [0, 0, 0, 0], [1, 2, 7, 8], "SAME_UPPER", false },
        { 2, [2, 3], [1, 1], [0, 0, 0, 0], [1, 2, 7, 8], "SAME_LOWER", false },
        { 1, [2], [2], [1, 2], [2, 3, 11], null, true },
    };

    [Theory]
    [MemberData(nameof(Cases))]
    public void PatchesTimesTheWeightGiveOnnxRuntimesConvOutput(int group, long[] strides, long[] dilations, long[] pads, long[] inputShape, string? autoPad, bool oneDimensional)
    {
        long outChannels = 2 * group, perGroup = inputShape[1] / group;
        long[] weightShape = oneDimensional ? [outChannels, perGroup, 3] : [outChannels, perGroup, 3, 2];
        var weight = GraphBuilder.RandomValues(3, (int)weightShape.Aggregate(1L, (a, b) => a * b));
        var bias = GraphBuilder.RandomValues(4, (int)outChannels);
        var input = GraphBuilder.RandomValues(5, (int)inputShape.Aggregate(1L, (a, b) => a * b));
        var attributes = new List<global::Onnx.AttributeProto>
        {
            GraphBuilder.IntAttribute("group", group),
            Ints("strides", strides),
            Ints("dilations", dilations),
        };
        attributes.Add(autoPad is null ? Ints("pads", pads) : new global::Onnx.AttributeProto { Name = "auto_pad", Type = global::Onnx.AttributeProto.Types.AttributeType.String, S = Google.Protobuf.ByteString.CopyFromUtf8(autoPad) });
        var builder = new GraphBuilder()
            .Input("x", inputShape)
            .Initializer("w", weightShape, weight)
            .Initializer("b", [outChannels], bias)
            .Node("Conv", ["x", "w", "b"], ["y"], "conv", [.. attributes])
            .Output("y");
        var model = builder.Build();
        var expected = OrtRunner.Run(builder.ToBytes(), new Dictionary<string, Func<Microsoft.ML.OnnxRuntime.OrtValue>> { ["x"] = OrtRunner.Floats(input, inputShape) })["y"];

        var layer = new WeightLayer("conv", "Conv", "w", weightShape, weight.Length, 0, false, ["conv"]);
        var site = Assert.Single(LinearInputSite.Of(layer, model.Graph)!);
        var geometry = site.Conv!;
        var layout = site.Layout;
        Assert.Equal(new LinearLayout(group, 2, (int)(perGroup * weightShape.Skip(2).Aggregate(1L, (a, b) => a * b)), true), layout);
        var patches = (int)geometry.PatchCount(inputShape);
        Assert.Equal(expected.Length, patches * outChannels);
        var positions = patches / (int)inputShape[0];
        for (var g = 0; g < group; g++)
        {
            var columns = new float[layout.Columns * patches];
            geometry.Patches(input, inputShape, g, 0, patches, columns);
            for (var r = 0; r < layout.Rows; r++)
            {
                var o = layout.Output(g, r);
                for (var v = 0; v < patches; v++)
                {
                    double y = bias[o];
                    for (var c = 0; c < layout.Columns; c++)
                    {
                        y += weight[layout.Index(g, r, c)] * (double)columns[(c * patches) + v];
                    }

                    var n = v / positions;
                    var at = (((n * (int)outChannels) + o) * positions) + (v % positions);
                    Assert.Equal(expected[at], y, 4);
                }
            }
        }
    }

    private static global::Onnx.AttributeProto Ints(string name, long[] values)
    {
        var attribute = new global::Onnx.AttributeProto { Name = name, Type = global::Onnx.AttributeProto.Types.AttributeType.Ints };
        attribute.Ints.AddRange(values);
        return attribute;
    }
}
