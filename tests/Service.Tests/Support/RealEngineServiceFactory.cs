using System.Globalization;
using System.Net.Http.Headers;
using Microsoft.AspNetCore.Hosting;
using Microsoft.AspNetCore.Mvc.Testing;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// The real service as <see cref="ServiceFactory"/> builds it (HTTP pipeline, SQLite store, Hangfire on
/// SQLite, temporary data folder of its own), but keeping the real engine (EngineAdapter) behind the
/// port, so uploads and searches run ONNX Runtime. Upload limits are small so the 413 cases stay cheap,
/// yet large enough for the demo model, the OCR classifier and their calibration sets.
/// </summary>
public sealed class RealEngineServiceFactory : WebApplicationFactory<Program>
{
    public const string ApiKey = ServiceFactory.ApiKey;

    /// <summary>The OCR classifier (579 KB) fits, with room to spare.</summary>
    public const long MaxModelBytes = 1L << 20;

    /// <summary>Four OCR samples of [3, 48, 192] float32 (442 KB) fit.</summary>
    public const long MaxDatasetBytes = 1L << 20;

    /// <summary>What a dataset may decode to here: above the 64 MiB zip bomb, so its ratio is what refuses it.</summary>
    public const long MaxDatasetDecodedBytes = 96L << 20;

    private readonly int workers;

    public RealEngineServiceFactory()
        : this(workers: 1)
    {
    }

    internal RealEngineServiceFactory(int workers)
    {
        this.workers = workers;
        DataFolder = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(DataFolder);
    }

    public string DataFolder { get; }

    /// <summary>A client that sends the test API key.</summary>
    public HttpClient CreateAuthorizedClient(string key = ApiKey)
    {
        var client = CreateClient();
        client.DefaultRequestHeaders.Authorization = new AuthenticationHeaderValue("Bearer", key);
        return client;
    }

    protected override void ConfigureWebHost(IWebHostBuilder builder)
    {
        builder.UseSetting("Bitbudget:DataFolder", DataFolder);
        builder.UseSetting("Bitbudget:Workers", workers.ToString(CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:QueuePollIntervalMs", "100");
        builder.UseSetting("Bitbudget:MaxModelBytes", MaxModelBytes.ToString(CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:MaxDatasetBytes", MaxDatasetBytes.ToString(CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:MaxDatasetDecodedBytes", MaxDatasetDecodedBytes.ToString(CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:ApiKeys:0", ApiKey);
    }

    protected override void Dispose(bool disposing)
    {
        base.Dispose(disposing);
        if (disposing)
        {
            try
            {
                Directory.Delete(DataFolder, recursive: true);
            }
            catch (IOException)
            {
                // A file still held open by a finishing worker; the temp folder is cleaned by the OS.
            }
        }
    }
}
