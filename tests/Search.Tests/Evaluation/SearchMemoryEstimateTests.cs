using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

public sealed class SearchMemoryEstimateTests
{
    private const long Cache = 512L << 20;

    [Fact]
    public void EstimateAddsDecodedDataOutputsCacheAndWeights()
    {
        // Mlp: input x [n,16] float32, output logits [n,10], weights 16x24 + 24x24 + 24x10 = 1200 parameters in layers.
        var model = SmallModels.Mlp();
        var estimate = SearchMemoryEstimate.Of(model, [new NpyArrayInfo("x", ElementType.Float32, [1000, 16], 1000 * 16 * 4)], Cache);

        // Per sample: 64 bytes of input, 2 x 10 float32 outputs (reference and trial) = 80 bytes.
        Assert.Equal(64 + 80, estimate.PerSampleBytes);
        Assert.Equal(Cache + (1200 * 4 * 3), estimate.FixedBytes);
        Assert.Equal(estimate.FixedBytes + (1000 * 144), estimate.Bytes);
    }

    [Fact]
    public void CompensatedRoundingAndBiasCorrectionCountTheLayersInputMoments()
    {
        // Mlp's layers read 16, 24 and 24 input values: Σ x x^T and Σ x in double, (16² + 16 + 2 x (24² + 24)) x 8 bytes.
        var model = SmallModels.Mlp();
        var moments = LayerInputCollector.MomentBytes(model, model.Layers, Cache);
        Assert.Equal(((16 * 16) + 16 + (2 * ((24 * 24) + 24))) * 8, moments);

        // What the collector really allocates for the same layers.
        var gathered = LayerInputCollector.Collect(model, SmallModels.MlpData(model, samples: 4), model.Layers, 32, Cache);
        Assert.Equal(moments, gathered.Values.Sum(i => Bitbudget.Search.Quantization.InputMoments.BytesFor(i.Moments.Groups, i.Moments.Columns)));

        var plain = SearchMemoryEstimate.Of(model, [new NpyArrayInfo("x", ElementType.Float32, [1000, 16], 1000 * 16 * 4)], Cache);
        var withMoments = SearchMemoryEstimate.Of(model, [new NpyArrayInfo("x", ElementType.Float32, [1000, 16], 1000 * 16 * 4)], Cache, inputMomentBytes: moments);
        Assert.Equal(plain.FixedBytes + moments, withMoments.FixedBytes);
        Assert.Equal(plain.Bytes + moments, withMoments.Bytes);

        // Bias correction alone keeps Σ x only.
        Assert.Equal((16 + 24 + 24) * 8, LayerInputCollector.MomentBytes(model, model.Layers, Cache, secondMoments: false));

        // A bound on the moments' memory leaves out the layers past it, in model order, as the collector does.
        Assert.Equal(((16 * 16) + 16) * 8, LayerInputCollector.MomentBytes(model, model.Layers, ((16 * 16) + 16) * 8));
    }

    [Fact]
    public void Float64DataCountsItsFloat32Copy()
    {
        var model = SmallModels.Mlp();
        var estimate = SearchMemoryEstimate.Of(model, [new NpyArrayInfo("x", ElementType.Float64, [10, 16], 10 * 16 * 8)], Cache);

        Assert.Equal(128 + 64 + 80, estimate.PerSampleBytes);
    }

    [Fact]
    public void AStateOnAxisOneCountsPerSampleAlongItsAxisAndAScalarConstantOnce()
    {
        // Streaming model: frame [n,8], state [2,n,6] (samples on axis 1), rate a 0-d int64 constant; outputs probability
        // [n,1] and next_state [2,n,6]; layers 8x6 + 6x6 + 6x1 = 90 parameters.
        var model = StreamingData.Model();
        const long n = 10_000;
        var estimate = SearchMemoryEstimate.Of(
            model,
            [
                new NpyArrayInfo("frame", ElementType.Float32, [n, 8], n * 8 * 4),
                new NpyArrayInfo("state", ElementType.Float32, [2, n, 6], 2 * n * 6 * 4),
                new NpyArrayInfo("rate", ElementType.Int64, [], 8),
            ],
            Cache);

        // Per sample: 32 + 48 bytes of inputs, 2 x (1 + 12) float32 outputs = 104 bytes; read along axis 0 the state
        // would have counted as 2 samples of 240,000 bytes each.
        Assert.Equal(n, estimate.Samples);
        Assert.Equal(32 + 48 + 104, estimate.PerSampleBytes);
        Assert.Equal(Cache + (90 * 4 * 3) + 8, estimate.FixedBytes);
    }

    [Fact]
    public void RefusalSaysHowManySamplesFitAndThatManyDo()
    {
        var model = SmallModels.Mlp();
        var limit = Cache + (100L << 20);
        NpyArrayInfo Samples(long n) => new("x", ElementType.Float32, [n, 16], n * 64);

        var refusal = Assert.Throws<EngineException>(() => SearchMemoryEstimate.Of(model, [Samples(2_000_000)], Cache).Check(limit, "Bitbudget:MaxSearchMemoryBytes"));

        Assert.Equal("search-too-large", refusal.Code);
        Assert.Contains("Bitbudget:MaxSearchMemoryBytes", refusal.Message, StringComparison.Ordinal);
        var fit = long.Parse(System.Text.RegularExpressions.Regex.Match(refusal.Message, @"at most (\d+) of its 2000000 samples").Groups[1].Value, System.Globalization.CultureInfo.InvariantCulture);
        SearchMemoryEstimate.Of(model, [Samples(fit)], Cache).Check(limit, "limit");
        Assert.Throws<EngineException>(() => SearchMemoryEstimate.Of(model, [Samples(fit + 1)], Cache).Check(limit, "limit"));
    }
}
