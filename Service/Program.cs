Console.WriteLine("bitbudget");
