using System.Globalization;
using System.Text.Json;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Xunit.Abstractions;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// The demo model and its retrain (demo --version 2: same data, other seeds) uploaded under one name and searched with
/// one budget: lineage lists both, and compare agrees, layer by layer, with the two manifests downloaded on their own.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class RealEngineCompareTests(RealEngineFixture fixture, DemoFolderFixture demo, ITestOutputHelper output) : IClassFixture<RealEngineFixture>
{
    private const string Name = "hive-monitor.onnx";
    private readonly HttpClient client = fixture.Factory.CreateAuthorizedClient();

    [Fact]
    public async Task CompareOfTwoVersionsAgreesWithBothManifestsLayerByLayer()
    {
        var dataset = await client.PostBytesAsync("/v1/datasets", File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));
        var datasetId = (await dataset.JsonAsync()).GetProperty("id").GetString()!;
        var first = await SearchAsync(demo.PathOf(HiveMonitorScenario.ModelFileName), datasetId);
        var second = await SearchAsync(demo.RetrainPathOf(HiveMonitorScenario.ModelFileName), datasetId);

        var versions = await (await client.GetAsync($"/v1/models?name={Name}")).JsonAsync();
        Assert.Equal([2, 1], versions.EnumerateArray().Select(m => m.GetProperty("version").GetInt32()));
        var searches = await (await client.GetAsync($"/v1/searches?name={Name}")).JsonAsync();
        Assert.Equal([second, first], searches.EnumerateArray().Select(s => s.GetProperty("id").GetString()));

        var compare = await (await client.GetAsync($"/v1/searches/{first}/compare/{second}")).JsonAsync();
        var manifests = new[] { await ManifestAsync(first), await ManifestAsync(second) };

        Assert.True(compare.GetProperty("sameModelName").GetBoolean());
        Assert.Equal(1, compare.GetProperty("base").GetProperty("modelVersion").GetInt32());
        Assert.Equal(2, compare.GetProperty("other").GetProperty("modelVersion").GetInt32());
        var layers = compare.GetProperty("layers").EnumerateArray().ToList();
        Assert.Equal(["conv1", "conv2", "fc1", "fc2"], layers.Select(l => l.GetProperty("name").GetString()));
        var changed = 0;
        foreach (var layer in layers)
        {
            var name = layer.GetProperty("name").GetString()!;
            Assert.Equal("name", layer.GetProperty("matchedBy").GetString());
            var (a, b) = (Layer(manifests[0], name), Layer(manifests[1], name));
            var bits = layer.GetProperty("bits");
            Assert.Equal(a.GetProperty("bits").GetInt32(), bits.GetProperty("base").GetInt32());
            Assert.Equal(b.GetProperty("bits").GetInt32(), bits.GetProperty("other").GetInt32());
            var differs = a.GetProperty("bits").GetInt32() != b.GetProperty("bits").GetInt32();
            changed += differs ? 1 : 0;
            Assert.Equal(differs ? "changed" : "same", layer.GetProperty("status").GetString());
            foreach (var width in layer.GetProperty("sensitivity").EnumerateArray())
            {
                var at = width.GetProperty("bits").GetInt32();
                var (sa, sb) = (Sqnr(a, at), Sqnr(b, at));
                Assert.Equal(sa, width.GetProperty("sqnrDb").GetProperty("base").GetDouble(), 9);
                Assert.Equal(sb, width.GetProperty("sqnrDb").GetProperty("other").GetDouble(), 9);
                Assert.Equal(sb - sa, width.GetProperty("sqnrDb").GetProperty("change").GetDouble(), 9);
            }

            output.WriteLine(string.Create(CultureInfo.InvariantCulture, $"{name}: {bits.GetProperty("base")} -> {bits.GetProperty("other")} bits"));
        }

        // The retrain moved at least one layer's choice (fc1: 4 -> 8 bits when this test was written); the count is what the manifests say.
        Assert.True(changed >= 1, "The retrain changed no layer's width; the demo's second version no longer shows a change.");
        var totals = compare.GetProperty("totals");
        Assert.Equal(changed, totals.GetProperty("changedLayers").GetInt32());
        Assert.Equal(manifests[0].GetProperty("totals").GetProperty("bytes").GetInt64(), totals.GetProperty("bytes").GetProperty("base").GetInt64());
        Assert.Equal(manifests[1].GetProperty("totals").GetProperty("bytes").GetInt64(), totals.GetProperty("bytes").GetProperty("other").GetInt64());
        Assert.Equal(0, totals.GetProperty("addedLayers").GetInt32());
    }

    private async Task<string> SearchAsync(string modelPath, string datasetId)
    {
        var model = await client.PostBytesAsync($"/v1/models?name={Name}", File.ReadAllBytes(modelPath));
        var modelId = (await model.JsonAsync()).GetProperty("id").GetString()!;
        // Nearest rounding without bias correction: with the default (compensated, corrected biases) both versions pick
        // the same widths, and a compare with nothing changed would not test the changed rows.
        var started = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 30 }, bits = new[] { 2, 3, 4, 6, 8 }, rounding = new[] { "nearest" }, biasCorrection = false });
        var id = started.GetProperty("id").GetString()!;
        var done = await RealEngineWalkthroughTests.WaitForEndAsync(client, id);
        Assert.True(done.GetProperty("state").GetString() == "succeeded", done.ToString());
        return id;
    }

    private async Task<JsonElement> ManifestAsync(string id) => await (await client.GetAsync($"/v1/searches/{id}/manifest")).JsonAsync();

    private static JsonElement Layer(JsonElement manifest, string name) =>
        manifest.GetProperty("layers").EnumerateArray().Single(l => l.GetProperty("name").GetString() == name);

    private static double Sqnr(JsonElement layer, int bits) =>
        layer.GetProperty("sensitivity").EnumerateArray().Single(s => s.GetProperty("bits").GetInt32() == bits).GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
}
