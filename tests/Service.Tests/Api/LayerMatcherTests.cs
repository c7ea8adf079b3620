using Bitbudget.Search.Manifest;
using Bitbudget.Service.Api;

namespace Bitbudget.Service.Tests.Api;

public sealed class LayerMatcherTests
{
    private static readonly ManifestMetrics NoError = new(0, null, 1, 0, 1, null);

    [Fact]
    public void LayersWithTheSameNamePairAndTheChangeIsOtherMinusBase()
    {
        var compared = LayerMatcher.Compare(
            [Layer("conv1", "Conv", [8, 1, 3, 3], 4, (4, 24.5, 0.01), (8, 48.0, 0.0001))],
            [Layer("conv1", "Conv", [8, 1, 3, 3], 8, (4, 20.5, 0.02), (8, 47.0, 0.0002))]);

        var layer = Assert.Single(compared);
        Assert.Equal(("conv1", null, "changed", "name"), (layer.Name, layer.OtherName, layer.Status, layer.MatchedBy));
        Assert.Equal(new ComparedValue(4, 8, 4), layer.Bits);
        Assert.Equal([4, 8], layer.Sensitivity.Select(w => w.Bits));
        Assert.Equal(new ComparedValue(24.5, 20.5, -4.0), layer.Sensitivity[0].SqnrDb);
        Assert.Equal(0.01, layer.Sensitivity[0].AdditiveError.Change);
    }

    [Fact]
    public void RenamedLayersPairByOperatorAndWeightShapeInGraphOrder()
    {
        // An exporter renumbered its nodes: the names moved, the shapes did not.
        var compared = LayerMatcher.Compare(
            [Layer("Conv_0", "Conv", [8, 1, 3, 3], 8), Layer("Conv_1", "Conv", [8, 8, 3, 3], 6), Layer("Conv_2", "Conv", [8, 8, 3, 3], 4)],
            [Layer("conv.a", "Conv", [8, 1, 3, 3], 8), Layer("conv.b", "Conv", [8, 8, 3, 3], 6), Layer("conv.c", "Conv", [8, 8, 3, 3], 3)]);

        Assert.Equal(["conv.a", "conv.b", "conv.c"], compared.Select(l => l.OtherName));
        Assert.All(compared, l => Assert.Equal("shape", l.MatchedBy));
        Assert.Equal(["same", "same", "changed"], compared.Select(l => l.Status));
    }

    [Fact]
    public void ANameMatchWinsOverAShapeMatchAndLeftoversAreAddedOrRemoved()
    {
        // The head kept its name but grew a fifth class; fc0 is new and has fc1's shape, but fc1 pairs by name first.
        var compared = LayerMatcher.Compare(
            [Layer("fc1", "Gemm", [32, 1024], 8), Layer("head", "Gemm", [4, 32], 8), Layer("gone", "MatMul", [16, 16], 4)],
            [Layer("fc1", "Gemm", [32, 1024], 8), Layer("fc0", "Gemm", [32, 1024], 6), Layer("head", "Gemm", [5, 32], 8)]);

        Assert.Equal(["fc1", "head", "gone", "fc0"], compared.Select(l => l.Name));
        Assert.Equal(["same", "same", "removed", "added"], compared.Select(l => l.Status));
        Assert.Equal([5L, 32L], compared[1].OtherShape);
        Assert.Null(compared[0].OtherShape);
        Assert.Equal(new ComparedValue(4, null, null), compared[2].Bits);
        Assert.Equal(new ComparedValue(null, 6, null), compared[3].Bits);
        Assert.Null(compared[3].MatchedBy);
    }

    [Fact]
    public void AWidthMeasuredOnOneSideOnlyHasNoChange()
    {
        var compared = LayerMatcher.Compare(
            [Layer("fc", "Gemm", [4, 32], null, (2, 5.0, 0.3), (8, 48.0, 0.0))],
            [Layer("fc", "Gemm", [4, 32], 8, (8, 47.0, 0.0))]);

        var layer = Assert.Single(compared);
        Assert.Equal("changed", layer.Status);
        Assert.Equal(new ComparedValue(null, 8, null), layer.Bits);
        Assert.Equal(new ComparedValue(5.0, null, null), layer.Sensitivity[0].SqnrDb);
        Assert.Equal(-1.0, layer.Sensitivity[1].SqnrDb.Change);
    }

    [Fact]
    public void AWidthKeptFp32OnBothSidesChangesByZeroNotNaN()
    {
        var compared = LayerMatcher.Compare(
            [Layer("fc", "Gemm", [4, 32], 32, (8, 40.0, 0.001), (32, double.PositiveInfinity, 0))],
            [Layer("fc", "Gemm", [4, 32], 8, (8, 38.5, 0.002), (32, double.PositiveInfinity, 0))]);

        Assert.Equal(new ComparedValue(double.PositiveInfinity, double.PositiveInfinity, 0), Assert.Single(compared).Sensitivity[1].SqnrDb);
        Assert.Equal(-1.5, compared[0].Sensitivity[0].SqnrDb.Change);
    }

    private static ManifestLayer Layer(string name, string op, long[] shape, int? bits, params (int Bits, double SqnrDb, double Additive)[] trials) => new(
        name,
        op,
        name + ".weight",
        shape,
        shape.Aggregate(1L, (a, b) => a * b),
        bits,
        "symmetric",
        "per-channel",
        0,
        "min-max",
        0,
        bits is null,
        false,
        trials.Select(t => new ManifestSensitivity(t.Bits, 0, t.Additive, NoError with { SqnrDb = t.SqnrDb })).ToList());
}
