using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
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

        var error = Assert.Throws<EngineException>(() => adapter.InspectDataset(zip));

        Assert.Equal("dataset-too-large", error.Code);
        Assert.Equal(2, new EngineAdapter(Options.Create(new BitbudgetOptions { MaxDatasetDecodedBytes = 8L << 20 })).InspectDataset(zip).Arrays[0].Shape.Count);
    }

    private static byte[] Npz(NpyArray array)
    {
        using var stream = new MemoryStream();
        NpzWriter.Write(stream, [array]);
        return stream.ToArray();
    }
}
