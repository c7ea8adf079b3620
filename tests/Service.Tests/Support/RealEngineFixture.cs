using System.Net;
using System.Security.Cryptography;
using System.Text.Json;
using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// One <see cref="RealEngineServiceFactory"/> per test class, plus the demo model and calibration set uploaded
/// once as a baseline that every test checks is still served unchanged after whatever it sent.
/// </summary>
public sealed class RealEngineFixture : IDisposable
{
    private readonly SemaphoreSlim gate = new(1, 1);

    public RealEngineServiceFactory Factory { get; } = new();

    /// <summary>GET /v1/models/{id} and /v1/datasets/{id} of the baseline, as first answered.</summary>
    public (string ModelId, string ModelJson, string DatasetId, string DatasetJson)? Baseline { get; private set; }

    /// <summary>Uploads the demo files once (later calls reuse the answer).</summary>
    public async Task<(string ModelId, string ModelJson, string DatasetId, string DatasetJson)> EnsureBaselineAsync(HttpClient client, string demoFolder)
    {
        await gate.WaitAsync();
        try
        {
            if (Baseline is { } known)
            {
                return known;
            }

            var model = await client.PostBytesAsync("/v1/models?name=hive-monitor.onnx", File.ReadAllBytes(Path.Combine(demoFolder, HiveMonitorScenario.ModelFileName)));
            Assert.True(model.StatusCode == HttpStatusCode.Created, await model.Content.ReadAsStringAsync());
            var dataset = await client.PostBytesAsync("/v1/datasets", File.ReadAllBytes(Path.Combine(demoFolder, HiveMonitorScenario.CalibrationFileName)));
            Assert.True(dataset.StatusCode == HttpStatusCode.Created, await dataset.Content.ReadAsStringAsync());
            var modelId = (await model.JsonAsync()).GetProperty("id").GetString()!;
            var datasetId = (await dataset.JsonAsync()).GetProperty("id").GetString()!;
            Baseline = (modelId, await client.GetStringAsync($"/v1/models/{modelId}"), datasetId, await client.GetStringAsync($"/v1/datasets/{datasetId}"));
            return Baseline.Value;
        }
        finally
        {
            gate.Release();
        }
    }

    /// <summary>
    /// After a refusal: /healthz still answers ok, the baseline model and dataset are served exactly as before,
    /// every stored blob still hashes to its name, and no half-written upload was left in the staging folder.
    /// </summary>
    public async Task AssertNothingLostAsync(HttpClient client)
    {
        var health = await client.GetAsync("/healthz");
        Assert.Equal(HttpStatusCode.OK, health.StatusCode);
        Assert.Equal("ok", (await health.JsonAsync()).GetProperty("status").GetString());

        if (Baseline is { } baseline)
        {
            Assert.Equal(baseline.ModelJson, await client.GetStringAsync($"/v1/models/{baseline.ModelId}"));
            Assert.Equal(baseline.DatasetJson, await client.GetStringAsync($"/v1/datasets/{baseline.DatasetId}"));
            using var model = JsonDocument.Parse(baseline.ModelJson);
            using var dataset = JsonDocument.Parse(baseline.DatasetJson);
            Assert.True(File.Exists(BlobPath(model.RootElement.GetProperty("sha256").GetString()!)), "The baseline model's blob is gone.");
            Assert.True(File.Exists(BlobPath(dataset.RootElement.GetProperty("sha256").GetString()!)), "The baseline dataset's blob is gone.");
        }

        var blobs = Path.Combine(Factory.DataFolder, "blobs");
        foreach (var file in Directory.EnumerateFiles(blobs, "*", SearchOption.AllDirectories))
        {
            var relative = Path.GetRelativePath(blobs, file);
            Assert.False(relative.StartsWith("tmp", StringComparison.Ordinal), $"A staged upload was left behind: {relative}");
            Assert.Equal(Path.GetFileName(file), Convert.ToHexStringLower(SHA256.HashData(File.ReadAllBytes(file))));
        }
    }

    public void Dispose() => Factory.Dispose();

    private string BlobPath(string sha) =>
        Directory.EnumerateFiles(Path.Combine(Factory.DataFolder, "blobs"), sha, SearchOption.AllDirectories).FirstOrDefault() ?? sha;
}
