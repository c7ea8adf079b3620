using Bitbudget.Search.Manifest;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>Default candidates follow the storage (ONNX: int8/uint8 below opset 21, int4/uint4 for 2-4 bits from 21), and the summary says what the storage closed off.</summary>
public sealed class CandidateWidthsTests
{
    [Theory]
    [InlineData(StorageRule.Container, 9, new[] { 8, 16, 32 })]
    [InlineData(StorageRule.Container, 13, new[] { 8, 16, 32 })]
    [InlineData(StorageRule.Container, 21, new[] { 4, 8, 16, 32 })]
    [InlineData(StorageRule.Packed, 13, new[] { 2, 3, 4, 5, 6, 8 })]
    public void DefaultsAreTheWidthsTheStorageTellsApart(StorageRule storage, long opset, int[] expected) =>
        Assert.Equal(expected, CandidateWidths.Defaults(storage, opset));

    [Theory]
    [InlineData(StorageRule.Container, 13, new[] { 2, 3, 4, 5, 6, 7 })]
    [InlineData(StorageRule.Container, 21, new[] { 2, 3, 5, 6, 7 })]
    [InlineData(StorageRule.Packed, 13, new int[0])]
    public void WidthsThatSaveNothingAreThoseAWiderWidthStoresInTheSameContainer(StorageRule storage, long opset, int[] expected) =>
        Assert.Equal(expected, CandidateWidths.SavingNothing([2, 3, 4, 5, 6, 7, 8, 16, 32], storage, opset));

    [Fact]
    public void WithoutGivenBitsTheSearchMeasuresOnlyTheStoragesWidthsAndSaysWhatPackedOrInt4StorageWouldWeigh()
    {
        var model = SmallModels.Mlp(opset: 13);
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 25), []), new InMemoryTrialStore(), null, CancellationToken.None);

        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.Equal([8, 16, 32], manifest.Settings.Bits);
        Assert.All(manifest.Layers, l => Assert.DoesNotContain(l.Sensitivity, s => s.Bits < 8));

        // The uniform 4-bit sizes named in the note are the counts of the two storages the note names.
        var packed = new ModelSizer(model, StorageRule.Packed);
        var int4 = new ModelSizer(model, StorageRule.Container, 21);
        var four = new LayerSetting(4);
        var packedFour = packed.OtherBytes + model.Layers.Sum(l => packed.LayerBytes(l, four));
        var int4Four = int4.OtherBytes + model.Layers.Sum(l => int4.LayerBytes(l, four));
        Assert.True(int4Four < result.Bytes && packedFour < result.Bytes, $"packed {packedFour} B, int4 {int4Four} B, plan {result.Bytes} B");
        Assert.Equal(
            $"Smaller widths are closed by the storage: 4 bits on every searched layer would take {packedFour:N0} B with --storage packed or {int4Four:N0} B stored as int4 with --target-opset 21, against {result.Bytes:N0} B for this plan; this search did not measure their error (give candidate bits such as 2,3,4,6,8 to measure it).",
            result.StorageNote);
        Assert.Equal(result.StorageNote, manifest.Outcome.StorageNote);
    }

    [Fact]
    public void WithMeasuredSubByteWidthsTheNoteGivesThePackedSizeTheAdditiveModelFitsTheBudgetIn()
    {
        var model = SmallModels.Mlp(opset: 13);
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 15), [2, 4, 8]), new InMemoryTrialStore(), null, CancellationToken.None);
        var packedRun = SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 15), [2, 4, 8], Storage: StorageRule.Packed), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(packedRun.Bytes < result.Bytes, $"{packedRun.Bytes} vs {result.Bytes}: {result.StorageNote}");
        Assert.StartsWith("Widths 2, 4 save nothing at opset 13", result.StorageNote, StringComparison.Ordinal);
        Assert.Contains("With --storage packed", result.StorageNote, StringComparison.Ordinal);
        Assert.DoesNotContain("did not measure", result.StorageNote, StringComparison.Ordinal);
        Assert.Null(packedRun.StorageNote);
        Assert.Equal("packed", packedRun.Storage);
        Assert.True(packedRun.Bytes < result.Bytes);
    }
}
