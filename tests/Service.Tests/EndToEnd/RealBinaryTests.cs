using System.Net;
using System.Net.Http.Json;
using System.Text.Json;
using System.Text.Json.Nodes;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Support;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// The real binary on a loopback port: the README walk-through on the demo model, and a crash in the
/// middle of a sweep on the real OCR classifier followed by a restart on the same data folder.
/// </summary>
public sealed class RealBinaryTests : IDisposable
{
    private readonly string _root = Directory.CreateTempSubdirectory("bitbudget-e2e-").FullName;

    [Fact]
    public async Task WalkThroughOnTheDemoModelGivesAManifestAndAModelThatRuns()
    {
        var demo = Path.Combine(_root, "demo");
        HiveMonitorScenario.Generate(demo);
        using var service = await ServiceProcess.StartAsync(Folder("data"));
        var client = service.Client;

        var (modelId, datasetId) = await client.UploadAsync(
            "hive-monitor",
            await File.ReadAllBytesAsync(Path.Combine(demo, "hive-monitor.onnx")),
            await File.ReadAllBytesAsync(Path.Combine(demo, "calibration.npz")));
        var search = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 }, bits = new[] { 2, 3, 4, 6, 8 } });
        var done = await WaitAsync(client, search.GetProperty("id").GetString()!, TimeSpan.FromSeconds(60));

        Assert.Equal("succeeded", done["state"]!.GetValue<string>());
        var id = done["id"]!.GetValue<string>();
        var manifest = JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{id}/manifest"))!;
        Assert.True(manifest["totals"]!["metrics"]!["sqnrDb"]!.GetValue<double>() >= 30);
        var model = await client.GetByteArrayAsync($"/v1/searches/{id}/model");
        using var session = new InferenceSession(model);
        Assert.Equal("logits", session.OutputNames.Single());
        Assert.StartsWith("layer,op,parameters,bits", await client.GetStringAsync($"/v1/searches/{id}/sensitivity"), StringComparison.Ordinal);
        Assert.NotEmpty(JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{id}/frontier"))!["points"]!.AsArray());
    }

    [Fact]
    public async Task KilledMidSweepTheSearchResumesAfterRestartWithExactlyTheTrialsOfAnUninterruptedRun()
    {
        var data = Folder("data");
        var body = new { modelId = "", datasetId = "", budget = new { metric = "sqnr", atLeast = 30 }, bits = new[] { 2, 3, 4, 5, 6, 8 } };
        string modelId, datasetId, crashedId;
        using (var first = await ServiceProcess.StartAsync(data))
        {
            (modelId, datasetId) = await first.Client.UploadAsync("ocr-classifier", await File.ReadAllBytesAsync(OcrModels.Classifier), OcrDataset(samples: 8));
            var search = await first.Client.StartSearchAsync(body with { modelId = modelId, datasetId = datasetId });
            crashedId = search.GetProperty("id").GetString()!;

            // Wait until the sweep is well under way, then pull the plug.
            var deadline = DateTime.UtcNow.AddSeconds(90);
            while (true)
            {
                var state = JsonNode.Parse(await first.Client.GetStringAsync($"/v1/searches/{crashedId}"))!;
                if (state["stage"]?.GetValue<string>() == "sweep" && state["progress"]!["done"]!.GetValue<int>() >= 40)
                {
                    Assert.True(state["progress"]!["done"]!.GetValue<int>() < state["progress"]!["total"]!.GetValue<int>());
                    break;
                }

                Assert.True(DateTime.UtcNow < deadline, $"The sweep did not get going: {state}");
                await Task.Delay(50);
            }

            first.Crash();
        }

        using var second = await ServiceProcess.StartAsync(data);
        var resumed = await WaitAsync(second.Client, crashedId, TimeSpan.FromSeconds(180));
        Assert.Equal("succeeded", resumed["state"]!.GetValue<string>());

        // The same search again, uninterrupted, on a service with a data folder of its own: on the same service it
        // would reuse the resumed search's sweep (no sweep twice) and prove nothing.
        using var uninterrupted = await ServiceProcess.StartAsync(Folder("uninterrupted"));
        var (freshModelId, freshDatasetId) = await uninterrupted.Client.UploadAsync("ocr-classifier", await File.ReadAllBytesAsync(OcrModels.Classifier), OcrDataset(samples: 8));
        var fresh = await uninterrupted.Client.StartSearchAsync(body with { modelId = freshModelId, datasetId = freshDatasetId });
        var freshId = fresh.GetProperty("id").GetString()!;
        Assert.Equal("succeeded", (await WaitAsync(uninterrupted.Client, freshId, TimeSpan.FromSeconds(180)))["state"]!.GetValue<string>());

        var crashedTrials = await TrialsAsync(second.Client, crashedId);
        var freshTrials = await TrialsAsync(uninterrupted.Client, freshId);
        Assert.Equal(freshTrials.Keys.Order(), crashedTrials.Keys.Order());
        foreach (var (key, metrics) in freshTrials)
        {
            Assert.Equal(metrics, crashedTrials[key]);
        }

        Assert.Equal(
            WithoutTimestamp(await uninterrupted.Client.GetStringAsync($"/v1/searches/{freshId}/manifest")),
            WithoutTimestamp(await second.Client.GetStringAsync($"/v1/searches/{crashedId}/manifest")));
        Assert.Equal(
            await uninterrupted.Client.GetByteArrayAsync($"/v1/searches/{freshId}/model"),
            await second.Client.GetByteArrayAsync($"/v1/searches/{crashedId}/model"));
    }

    public void Dispose()
    {
        try
        {
            Directory.Delete(_root, recursive: true);
        }
        catch (IOException)
        {
            // A killed process may still hold a file for a moment; the folder is under the temp directory anyway.
        }
    }

    private string Folder(string name) => Directory.CreateDirectory(Path.Combine(_root, name)).FullName;

    /// <summary>Random crops in [-1, 1) for the OCR classifier's input 'x' [N,3,48,192].</summary>
    internal static byte[] OcrDataset(int samples)
    {
        var random = new Random(3);
        var x = new float[samples * 3 * 48 * 192];
        for (var i = 0; i < x.Length; i++)
        {
            x[i] = random.NextSingle() * 2 - 1;
        }

        using var stream = new MemoryStream();
        NpzWriter.Write(stream, [new NpyArray("x", ElementType.Float32, [samples, 3, 48, 192], x)]);
        return stream.ToArray();
    }

    internal static async Task<JsonNode> WaitAsync(HttpClient client, string id, TimeSpan limit)
    {
        var deadline = DateTime.UtcNow + limit;
        while (true)
        {
            var search = JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{id}"))!;
            var state = search["state"]!.GetValue<string>();
            if (state is "succeeded" or "failed" or "canceled")
            {
                return search;
            }

            Assert.True(DateTime.UtcNow < deadline, $"Search {id} is still {state}: {search}");
            await Task.Delay(200);
        }
    }

    /// <summary>Every stored trial of a search (all pages): key to its metrics as JSON text.</summary>
    internal static async Task<Dictionary<string, string>> TrialsAsync(HttpClient client, string id)
    {
        var trials = new Dictionary<string, string>(StringComparer.Ordinal);
        for (var offset = 0; ; offset += 100)
        {
            var page = JsonNode.Parse(await client.GetStringAsync($"/v1/searches/{id}/trials?offset={offset}&limit=100"))!;
            var items = page["items"]!.AsArray();
            foreach (var item in items)
            {
                trials.Add(item!["key"]!.GetValue<string>(), item["metrics"]!.ToJsonString());
            }

            if (items.Count < 100)
            {
                return trials;
            }
        }
    }

    internal static string WithoutTimestamp(string manifest)
    {
        var node = JsonNode.Parse(manifest)!;
        node["createdAt"] = null;
        return node.ToJsonString();
    }
}
