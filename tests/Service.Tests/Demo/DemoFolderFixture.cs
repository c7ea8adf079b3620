using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>Generates the demo once into its own temporary folder for all tests of a class, and removes it afterwards.</summary>
public sealed class DemoFolderFixture : IDisposable
{
    public DemoFolderFixture()
    {
        Folder = Path.Combine(Path.GetTempPath(), "bitbudget-demo-" + Guid.NewGuid().ToString("N"));
        Result = HiveMonitorScenario.Generate(Folder);
    }

    public string Folder { get; }

    internal DemoResult Result { get; }

    public string PathOf(string fileName) => Path.Combine(Folder, fileName);

    public void Dispose()
    {
        if (Directory.Exists(Folder))
        {
            Directory.Delete(Folder, recursive: true);
        }
    }
}
