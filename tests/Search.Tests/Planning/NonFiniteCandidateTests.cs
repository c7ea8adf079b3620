using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// A candidate that breaks the model is no choice. Seen on the real OCR detector: a folded convolution at FP16
/// made the outputs non-finite, the additive error came out infinite, and the whole plan stopped with
/// "invalid-choice-cost". IEEE 754 half precision tops out at 65504, so an FP32 weight of 1e5 becomes infinity.
/// </summary>
public sealed class NonFiniteCandidateTests
{
    [Fact]
    public void AWidthThatMakesTheOutputsNonFiniteIsNotOfferedAndTheSearchSaysSo()
    {
        var weights = OverflowingFp16();
        var model = OnnxModel.Load(
            new GraphBuilder()
                .Opset(13)
                .Input("x", -1, 16)
                .Initializer("w1", [16, 1], weights)
                .Initializer("w2", [1, 10], GraphBuilder.RandomValues(4, 10, 0.5f))
                .Node("MatMul", ["x", "w1"], ["h"], "fc1")
                .Node("MatMul", ["h", "w2"], ["y"], "fc2")
                .Output("y", -1, 10)
                .ToBytes(),
            "overflow");
        var data = SmallModels.MlpData(model); // labels in [0, 10), as y has 10 classes

        var result = Search(model, data, [8, 16]);

        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        var fc1 = manifest.Layers.Single(l => l.Name == "fc1");
        Assert.Equal(8, fc1.Bits);

        // Its FP16 trial is still reported as measured, non-finite figures included (written as "NaN"/"-Infinity").
        var half = fc1.Sensitivity.Single(s => s.Bits == 16);
        Assert.False(double.IsFinite(half.AdditiveError));
        Assert.Contains(result.Warnings!, w => w.StartsWith("Layer 'fc1' at FP16 gave an infinite error", StringComparison.Ordinal));
        Assert.DoesNotContain(result.Warnings!, w => w.Contains("'fc2'", StringComparison.Ordinal));
        Assert.DoesNotContain(result.Warnings!, w => w.Contains("is zero on every calibration sample", StringComparison.Ordinal));
    }

    [Fact]
    public void AJudgedOutputThatIsZeroOnEverySampleIsCalledOut()
    {
        // Seen on the real OCR detector fed pages without text: its sigmoid map was 0 everywhere, so every
        // trial was either lossless or infinitely bad. Relu of minus a non-negative input is zero everywhere.
        var model = OnnxModel.Load(
            new GraphBuilder()
                .Opset(13)
                .Input("x", -1, 16)
                .Initializer("w1", [16, 10], GraphBuilder.RandomValues(3, 160, 0.5f))
                .Initializer("w2", [16, 10], GraphBuilder.RandomValues(4, 160, 0.5f))
                .Node("MatMul", ["x", "w1"], ["y"], "fc1")
                .Node("Abs", ["x"], ["a"], "abs")
                .Node("Neg", ["a"], ["n"], "neg")
                .Node("Relu", ["n"], ["r"], "relu")
                .Node("MatMul", ["r", "w2"], ["silent"], "fc2")
                .Output("y", -1, 10)
                .Output("silent", -1, 10)
                .ToBytes(),
            "silent");

        var result = Search(model, SmallModels.MlpData(model), [8, 16]);

        Assert.Contains(result.Warnings!, w => w.StartsWith("Output 'silent' is zero on every calibration sample", StringComparison.Ordinal));
        Assert.DoesNotContain(result.Warnings!, w => w.StartsWith("Output 'y'", StringComparison.Ordinal));
    }

    [Fact]
    public void WhenNoWidthOfALayerWorksTheSearchSaysWhatToDo()
    {
        var weights = OverflowingFp16();
        var model = OnnxModel.Load(
            new GraphBuilder()
                .Opset(13)
                .Input("x", -1, 16)
                .Initializer("w1", [16, 10], [.. Enumerable.Repeat(weights, 10).SelectMany(w => w)])
                .Node("MatMul", ["x", "w1"], ["y"], "fc1")
                .Output("y", -1, 10)
                .ToBytes(),
            "overflow");

        var error = Assert.Throws<EngineException>(() => Search(model, SmallModels.MlpData(model), [16]));

        Assert.Equal("trial-non-finite", error.Code);
        Assert.Contains("'fc1'", error.Message, StringComparison.Ordinal);
        Assert.Contains("add 32", error.Message, StringComparison.Ordinal);
    }

    /// <summary>16 small weights and one of 1e5, beyond FP16's largest finite value (65504, IEEE 754 binary16).</summary>
    private static float[] OverflowingFp16()
    {
        var weights = GraphBuilder.RandomValues(3, 16, 0.5f);
        weights[5] = 1e5f;
        return weights;
    }

    private static SearchResult Search(OnnxModel model, CalibrationSet data, int[] bits) =>
        SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 20), bits), new InMemoryTrialStore(), null, CancellationToken.None);
}
