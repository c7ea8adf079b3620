using Bitbudget.Service.Tests.Support;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Playwright;

namespace Bitbudget.Service.Tests.Web;

/// <summary>
/// A running search's progress shows on the list without reloading: the service (Kestrel on a loopback port, the
/// engine port held by <see cref="FakeSearchEngine"/> after its first sweep trial) in Debian's chromium.
/// </summary>
public sealed class PageLiveProgressTests : IAsyncLifetime
{
    private readonly ServiceFactory factory = new(workers: 1, configureKey: true, new Dictionary<string, string> { ["urls"] = "http://127.0.0.1:0" });
    private IPlaywright? playwright;
    private IBrowser? browser;

    public async Task InitializeAsync()
    {
        factory.UseKestrel();
        factory.StartServer();
        playwright = await Playwright.CreateAsync();
        browser = await playwright.Chromium.LaunchAsync(BrowserService.LaunchOptions);
    }

    [Fact]
    public async Task ARunningSearchShowsItsStageAndProgressAndTurnsSucceededWithoutAReload()
    {
        var address = factory.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.Single();
        using var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync("live-progress");
        var hold = factory.Engine.HoldRun("live-progress");
        var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
        await hold.Started.Task.WaitAsync(TimeSpan.FromSeconds(30));
        var running = await client.WaitForStateAsync(id, "running");
        var (done, total) = (running.GetProperty("progress").GetProperty("done").GetInt32(), running.GetProperty("progress").GetProperty("total").GetInt32());

        var context = await browser!.NewContextAsync(new BrowserNewContextOptions { BaseURL = address });
        var page = await context.NewPageAsync();
        var errors = new List<string>();
        page.Console += (_, message) => { if (message.Type == "error") errors.Add(message.Text); };
        page.PageError += (_, error) => errors.Add(error);
        await page.GotoAsync("/");
        await page.FillAsync("#key-input", ServiceFactory.ApiKey);
        await page.ClickAsync("#key-form button[type=submit]");

        var row = page.Locator($"tr[data-search-id='{id}']");
        await page.Locator($"tr[data-search-id='{id}'][data-state='running']").WaitForAsync();
        Assert.Contains($"sweep: {done} of {total}", await row.InnerTextAsync(), StringComparison.Ordinal);
        await page.EvaluateAsync("() => { window.notReloaded = true; }");

        hold.Release();
        await page.Locator($"tr[data-search-id='{id}'][data-state='succeeded']").WaitForAsync(new LocatorWaitForOptions { Timeout = 30000 });

        Assert.True(await page.EvaluateAsync<bool>("() => window.notReloaded === true"), "The page reloaded to show the new state.");
        Assert.DoesNotContain("sweep:", await row.InnerTextAsync(), StringComparison.Ordinal);
        Assert.Empty(errors);
        await context.CloseAsync();
    }

    public async Task DisposeAsync()
    {
        if (browser is not null)
        {
            await browser.DisposeAsync();
        }

        playwright?.Dispose();
        await factory.DisposeAsync();
    }
}
