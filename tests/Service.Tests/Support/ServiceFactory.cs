using System.Net.Http.Headers;
using Bitbudget.Service.Engine;
using Microsoft.AspNetCore.Hosting;
using Microsoft.AspNetCore.Mvc.Testing;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.DependencyInjection.Extensions;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// The real service (HTTP pipeline, SQLite store, Hangfire on SQLite) in a temporary data folder of its
/// own, with the engine port replaced by <see cref="FakeSearchEngine"/>.
/// </summary>
public sealed class ServiceFactory : WebApplicationFactory<Program>
{
    public const string ApiKey = "test-key-3f9c2a";
    public const long MaxModelBytes = 4096;

    private readonly int workers;
    private readonly bool configureKey;
    private readonly IReadOnlyDictionary<string, string> settings;

    public ServiceFactory()
        : this(workers: 1, configureKey: true)
    {
    }

    internal ServiceFactory(int workers, bool configureKey, IReadOnlyDictionary<string, string>? settings = null)
    {
        this.workers = workers;
        this.configureKey = configureKey;
        this.settings = settings ?? new Dictionary<string, string>();
        DataFolder = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(DataFolder);
    }

    public string DataFolder { get; }

    internal FakeSearchEngine Engine { get; } = new();

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
        builder.UseSetting("Bitbudget:Workers", workers.ToString(System.Globalization.CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:QueuePollIntervalMs", "100");
        builder.UseSetting("Bitbudget:MaxModelBytes", MaxModelBytes.ToString(System.Globalization.CultureInfo.InvariantCulture));
        builder.UseSetting("Bitbudget:MaxLayers", "5");
        if (configureKey)
        {
            builder.UseSetting("Bitbudget:ApiKeys:0", ApiKey);
        }

        foreach (var (key, value) in settings)
        {
            builder.UseSetting(key, value);
        }

        builder.ConfigureServices(services =>
        {
            services.RemoveAll<ISearchEngine>();
            services.AddSingleton<ISearchEngine>(Engine);
        });
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
