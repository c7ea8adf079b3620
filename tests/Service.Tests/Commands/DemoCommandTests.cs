namespace Bitbudget.Service.Tests.Commands;

[Collection(ConsoleCollection.Name)]
public sealed class DemoCommandTests
{
    [Theory]
    [InlineData("--bogus")]
    [InlineData("--out")]
    [InlineData("--version")]
    [InlineData("--version", "0")]
    [InlineData("--version", "two")]
    public async Task UnknownOrIncompleteArgumentsExitWithUsageCode2(params string[] arguments)
    {
        var run = await CommandRun.RunAsync(["demo", .. arguments]);

        Assert.True(run.ExitCode == 2, run.ToString());
        Assert.StartsWith("error: ", run.ErrorLines[0], StringComparison.Ordinal);
        Assert.Contains("demo --help", run.Error, StringComparison.Ordinal);
    }

    [Fact]
    public async Task AnOutFolderUnderAFileIsOneErrorLineNamingItAndExit1()
    {
        var file = Path.GetTempFileName();
        try
        {
            var run = await CommandRun.RunAsync("demo", "--out", Path.Combine(file, "demo"));

            Assert.True(run.ExitCode == 1, run.ToString());
            var line = Assert.Single(run.ErrorLinesStartingWithError);
            Assert.Contains($"'{Path.Combine(file, "demo")}'", line, StringComparison.Ordinal);
        }
        finally
        {
            File.Delete(file);
        }
    }
}
