using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>
/// Generates the demo once into its own temporary folder for all tests of a class, and removes it afterwards.
/// A retrain (version 2) is generated into a second folder the first time a test asks for it.
/// </summary>
public sealed class DemoFolderFixture : IDisposable
{
    private readonly Lazy<DemoResult> retrain;

    public DemoFolderFixture()
    {
        Folder = Path.Combine(Path.GetTempPath(), "bitbudget-demo-" + Guid.NewGuid().ToString("N"));
        RetrainFolder = Folder + "-v2";
        Result = HiveMonitorScenario.Generate(Folder);
        retrain = new Lazy<DemoResult>(() => HiveMonitorScenario.Generate(RetrainFolder, version: 2), LazyThreadSafetyMode.ExecutionAndPublication);
    }

    public string Folder { get; }

    /// <summary>Where <see cref="RetrainPathOf"/> finds version 2 of the demo.</summary>
    public string RetrainFolder { get; }

    internal DemoResult Result { get; }

    public string PathOf(string fileName) => Path.Combine(Folder, fileName);

    /// <summary>A file of the demo's retrain (same data sets, the model trained from other seeds), generated on first use.</summary>
    public string RetrainPathOf(string fileName)
    {
        _ = retrain.Value;
        return Path.Combine(RetrainFolder, fileName);
    }

    public void Dispose()
    {
        foreach (var folder in new[] { Folder, RetrainFolder })
        {
            if (Directory.Exists(folder))
            {
                Directory.Delete(folder, recursive: true);
            }
        }
    }
}
