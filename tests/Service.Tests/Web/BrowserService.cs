using System.Net;
using System.Text.Json;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Api;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.EndToEnd;
using Bitbudget.Service.Tests.Support;
using Microsoft.Playwright;

namespace Bitbudget.Service.Tests.Web;

/// <summary>
/// The real service binary on loopback with two searches of the demo model under one name (version 1 and its
/// retrain, version 2), and Debian's chromium driven by Playwright. Set up once per test class, on first use.
/// </summary>
public sealed class BrowserService : IAsyncLifetime
{
    /// <summary>Debian's chromium; Playwright never downloads a browser here.</summary>
    public const string Chromium = "/usr/bin/chromium";

    public const string ModelName = "hive-monitor.onnx";

    /// <summary>
    /// Headless Debian chromium as root on a closed network: no sandbox, and no background connections (they are
    /// refused here and stall the browser). Playwright gives every launch a fresh profile folder of its own.
    /// </summary>
    public static BrowserTypeLaunchOptions LaunchOptions => new()
    {
        ExecutablePath = Chromium,
        Headless = true,
        Args =
        [
            "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync",
        ],
    };

    private readonly SemaphoreSlim gate = new(1, 1);
    private readonly string dataFolder = Path.Combine(Path.GetTempPath(), "bitbudget-browser-" + Guid.NewGuid().ToString("N"));
    private ServiceProcess? service;
    private string? datasetId;
    private string? reusing;
    private IPlaywright? playwright;

    public IBrowser Browser { get; private set; } = null!;

    public Uri BaseAddress => service!.BaseAddress;

    public HttpClient Client => service!.Client;

    public string ApiKey => ServiceProcess.ApiKey;

    /// <summary>The search of version 1 and of version 2 (the retrain), both succeeded.</summary>
    public (string First, string Second) Searches { get; private set; }

    public async Task EnsureAsync(DemoFolderFixture demo)
    {
        await gate.WaitAsync();
        try
        {
            if (service is not null)
            {
                return;
            }

            Assert.True(File.Exists(Chromium), $"{Chromium} is missing: install Debian's chromium (apt-get install -y chromium; .ci/run does).");
            Directory.CreateDirectory(dataFolder);
            service = await ServiceProcess.StartAsync(dataFolder);
            var dataset = await service.Client.PostBytesAsync("/v1/datasets", File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));
            Assert.Equal(HttpStatusCode.Created, dataset.StatusCode);
            var datasetId = (await dataset.JsonAsync()).GetProperty("id").GetString()!;
            this.datasetId = datasetId;
            var first = await SearchAsync(demo.PathOf(HiveMonitorScenario.ModelFileName), datasetId);
            var second = await SearchAsync(demo.RetrainPathOf(HiveMonitorScenario.ModelFileName), datasetId);
            Searches = (first, second);

            playwright = await Playwright.CreateAsync();
            Browser = await playwright.Chromium.LaunchAsync(LaunchOptions);
        }
        finally
        {
            gate.Release();
        }
    }

    /// <summary>A fresh browser tab (empty sessionStorage) that records every console error and uncaught exception.</summary>
    public async Task<(IPage Page, List<string> Errors)> NewPageAsync()
    {
        var context = await Browser.NewContextAsync(new BrowserNewContextOptions { BaseURL = BaseAddress.ToString(), ViewportSize = new ViewportSize { Width = 1280, Height = 900 } });
        var page = await context.NewPageAsync();
        var errors = new List<string>();
        page.Console += (_, message) =>
        {
            if (message.Type == "error")
            {
                lock (errors)
                {
                    errors.Add(message.Text);
                }
            }
        };
        page.PageError += (_, error) =>
        {
            lock (errors)
            {
                errors.Add(error);
            }
        };
        return (page, errors);
    }

    /// <summary>Opens the page and answers its key dialog with the service's key.</summary>
    public async Task<(IPage Page, List<string> Errors)> SignedInPageAsync(string hash = "#/")
    {
        var (page, errors) = await NewPageAsync();
        await page.GotoAsync("/" + hash);
        await page.FillAsync("#key-input", ApiKey);
        await page.ClickAsync("#key-form button[type=submit]");
        await page.WaitForSelectorAsync("#key-dialog", new PageWaitForSelectorOptions { State = WaitForSelectorState.Hidden });
        return (page, errors);
    }

    public async Task<JsonElement> GetJsonAsync(string path) => await (await Client.GetAsync(path)).JsonAsync();

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        if (Browser is not null)
        {
            await Browser.DisposeAsync();
        }

        playwright?.Dispose();
        service?.Dispose();
        try
        {
            Directory.Delete(dataFolder, recursive: true);
        }
        catch (IOException)
        {
            // A file the stopped service still held; the temp folder is cleaned by the OS.
        }
    }

    /// <summary>
    /// A third search, made on first use: version 1 again with only a lower budget, so it reuses the first search's
    /// sweep. It is newer than <see cref="Searches"/>; the search list shows it first.
    /// </summary>
    public async Task<string> ReusingSearchAsync(DemoFolderFixture demo)
    {
        await EnsureAsync(demo);
        await gate.WaitAsync();
        try
        {
            return reusing ??= await SearchAsync(demo.PathOf(HiveMonitorScenario.ModelFileName), datasetId!, atLeast: 20);
        }
        finally
        {
            gate.Release();
        }
    }

    private async Task<string> SearchAsync(string modelPath, string datasetId, double atLeast = 30)
    {
        var model = await service!.Client.PostBytesAsync($"/v1/models?name={ModelName}", File.ReadAllBytes(modelPath));
        var modelId = (await model.JsonAsync()).GetProperty("id").GetString()!;
        // Nearest rounding without bias correction: with the default (compensated, corrected biases) the retrain picks the
        // same widths as version 1, and the compare page would have no changed row to show.
        var started = await service.Client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast }, bits = new[] { 2, 3, 4, 6, 8 }, rounding = new[] { "nearest" }, biasCorrection = false });
        var id = started.GetProperty("id").GetString()!;
        var done = await RealEngineWalkthroughTests.WaitForEndAsync(service.Client, id);
        Assert.True(done.GetProperty("state").GetString() == "succeeded", done.ToString());
        return id;
    }
}
